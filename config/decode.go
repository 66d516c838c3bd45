package config

import (
	"fmt"
	"path/filepath"
	"sort"
	"strconv"
	"strings"
	"time"

	"go.yaml.in/yaml/v3"
)

// decoder walks the YAML node tree, converting values and collecting every
// problem with its line.
type decoder struct {
	dir          string // relative paths are resolved against it
	problems     []Problem
	fromDefaults map[*yaml.Node]bool
	readFile     func(string) ([]byte, error)
	linkNode     *yaml.Node         // the outlet.discharges_into just read
	linkNodes    map[int]*yaml.Node // by tank index, for the checks across tanks
	// merged caches the entries of every mapping reached through a merge
	// key, so that merges of merges cost their size, not the product of
	// their fan-outs (a 700-byte file of nested merges took 50 s without).
	merged map[*yaml.Node][]entry
	calls  int // entries computed, for the test of merge fan-out
}

func (d *decoder) add(path string, n *yaml.Node, format string, a ...any) {
	line := 0
	if n != nil {
		line = n.Line
		if d.fromDefaults[n] && strings.HasPrefix(path, "tanks[") {
			if i := strings.IndexByte(path, ']'); i > 0 {
				path = "defaults" + path[i+1:]
			}
		}
	}
	d.problems = append(d.problems, Problem{Path: path, Line: line, Msg: fmt.Sprintf(format, a...)})
}

// deref follows aliases (bounded, in case of a cycle).
func deref(n *yaml.Node) *yaml.Node {
	for i := 0; n != nil && n.Kind == yaml.AliasNode && i < 100; i++ {
		n = n.Alias
	}
	if n != nil && n.Kind == yaml.AliasNode {
		return nil
	}
	return n
}

func isNull(n *yaml.Node) bool {
	return n == nil || n.Kind == yaml.ScalarNode && n.ShortTag() == "!!null"
}

func kindName(n *yaml.Node) string {
	switch n.Kind {
	case yaml.MappingNode:
		return "a mapping"
	case yaml.SequenceNode:
		return "a list"
	case yaml.ScalarNode:
		return "a single value"
	}
	return "something else"
}

// entry is one key of a mapping.
type entry struct {
	key   *yaml.Node
	value *yaml.Node
}

// entries lists a mapping's keys in order, resolving aliases and merge keys
// ("<<", whose keys the mapping's own keys override). Duplicate keys are
// problems.
func (d *decoder) entries(n *yaml.Node, path string, depth int) []entry {
	n = deref(n)
	if n == nil || n.Kind != yaml.MappingNode || depth > 10 {
		return nil
	}
	d.calls++
	var own, merged []entry
	seen := map[string]*yaml.Node{}
	for i := 0; i+1 < len(n.Content); i += 2 {
		k, v := n.Content[i], deref(n.Content[i+1])
		if k.Kind != yaml.ScalarNode {
			d.add(path, k, "keys must be plain names")
			continue
		}
		if k.Value == "<<" && k.ShortTag() == "!!merge" {
			srcs := []*yaml.Node{v}
			if v != nil && v.Kind == yaml.SequenceNode {
				srcs = v.Content
			}
			for _, s := range srcs {
				merged = append(merged, d.mergedEntries(s, path, depth+1)...)
			}
			continue
		}
		if prev := seen[k.Value]; prev != nil {
			d.add(join(path, k.Value), k, "repeated key (first at line %d)", prev.Line)
			continue
		}
		seen[k.Value] = k
		own = append(own, entry{k, v})
	}
	for _, e := range merged {
		if seen[e.key.Value] == nil {
			seen[e.key.Value] = e.key
			own = append(own, e)
		}
	}
	return own
}

// mergedEntries is entries for a mapping merged in with "<<", computed
// once per mapping node.
func (d *decoder) mergedEntries(n *yaml.Node, path string, depth int) []entry {
	n = deref(n)
	if e, ok := d.merged[n]; ok {
		return e
	}
	e := d.entries(n, path, depth)
	if d.merged == nil {
		d.merged = map[*yaml.Node][]entry{}
	}
	d.merged[n] = e
	return e
}

func join(path, key string) string {
	if path == "" {
		return key
	}
	return path + "." + key
}

// fields gives typed access to one mapping and reports keys nobody asked for.
type fields struct {
	d    *decoder
	path string
	node *yaml.Node
	vals map[string]entry
	used map[string]bool
}

// mapping opens n as a mapping; a missing (nil or null) node is an empty one.
func (d *decoder) mapping(n *yaml.Node, path string) *fields {
	f := &fields{d: d, path: path, node: n, vals: map[string]entry{}, used: map[string]bool{}}
	n = deref(n)
	if isNull(n) {
		return f
	}
	if n.Kind != yaml.MappingNode {
		d.add(path, n, "want a mapping of keys, got %s", kindName(n))
		return f
	}
	for _, e := range d.entries(n, path, 0) {
		f.vals[e.key.Value] = e
	}
	return f
}

// line is where to report a problem about the mapping as a whole.
func (f *fields) at() *yaml.Node { return f.node }

// get returns the value of key (nil when absent or null) and marks it used.
func (f *fields) get(key string) *yaml.Node {
	f.used[key] = true
	e, ok := f.vals[key]
	if !ok || isNull(e.value) {
		return nil
	}
	return e.value
}

func (f *fields) has(key string) bool { return f.get(key) != nil }

// done reports every key that was never read.
func (f *fields) done() {
	var extra []entry
	for k, e := range f.vals {
		if !f.used[k] {
			extra = append(extra, e)
		}
	}
	sort.Slice(extra, func(i, j int) bool { return extra[i].key.Line < extra[j].key.Line })
	for _, e := range extra {
		f.d.add(join(f.path, e.key.Value), e.key, "unknown key")
	}
}

// scalar returns the text of a single value, or reports a list or mapping.
func (f *fields) scalar(key string) (string, *yaml.Node, bool) {
	n := f.get(key)
	if n == nil {
		return "", nil, false
	}
	if n.Kind != yaml.ScalarNode {
		f.d.add(join(f.path, key), n, "want a single value, got %s", kindName(n))
		return "", n, false
	}
	return n.Value, n, true
}

func (f *fields) str(key, def string) string {
	s, _, ok := f.scalar(key)
	if !ok {
		return def
	}
	return s
}

func (f *fields) required(key string) string {
	s, n, ok := f.scalar(key)
	if n == nil {
		f.d.add(join(f.path, key), f.at(), "required")
	}
	if ok && strings.TrimSpace(s) == "" {
		f.d.add(join(f.path, key), n, "must not be empty")
	}
	return s
}

// oneOf reads a value that must be one of the choices; def when absent.
func (f *fields) oneOf(key, def string, choices ...string) string {
	s, n, ok := f.scalar(key)
	if !ok {
		return def
	}
	for _, c := range choices {
		if s == c {
			return s
		}
	}
	f.d.add(join(f.path, key), n, "%q is not one of %s", s, strings.Join(choices, ", "))
	return def
}

// quantity converts a value with parse; def when absent. check, when not nil,
// returns a message for an unacceptable value.
func quantity[T any](f *fields, key string, def T, parse func(string) (T, error), check func(T) string) T {
	s, n, ok := f.scalar(key)
	if !ok {
		return def
	}
	v, err := parse(s)
	if err != nil {
		f.d.add(join(f.path, key), n, "%v", err)
		return def
	}
	if check != nil {
		if msg := check(v); msg != "" {
			f.d.add(join(f.path, key), n, "%s", msg)
			return def
		}
	}
	return v
}

func parseNumber(s string) (float64, error) {
	v, unit, err := splitQuantity(s)
	if err != nil {
		return 0, fmt.Errorf("want a number: %w", err)
	}
	if unit != "" {
		return 0, fmt.Errorf("want a plain number, without the unit %q", unit)
	}
	return v, nil
}

func parseInt(s string) (int, error) {
	v, err := strconv.Atoi(strings.TrimSpace(s))
	if err != nil {
		return 0, fmt.Errorf("want a whole number, got %q", s)
	}
	return v, nil
}

func parseBool(s string) (bool, error) {
	switch s {
	case "true", "True", "TRUE", "yes", "on":
		return true, nil
	case "false", "False", "FALSE", "no", "off":
		return false, nil
	}
	return false, fmt.Errorf("want true or false, got %q", s)
}

func positive(v float64) string {
	if v <= 0 {
		return "must be positive"
	}
	return ""
}

func positiveDuration(v time.Duration) string {
	if v <= 0 {
		return "must be positive"
	}
	return ""
}

func nonNegativeDuration(v time.Duration) string {
	if v < 0 {
		return "must not be negative"
	}
	return ""
}

func between(lo, hi float64, openLo, openHi bool) func(float64) string {
	return func(v float64) string {
		if v < lo || v > hi || openLo && v == lo || openHi && v == hi {
			l, r := "[", "]"
			if openLo {
				l = "("
			}
			if openHi {
				r = ")"
			}
			return fmt.Sprintf("must be in %s%g, %g%s", l, lo, hi, r)
		}
		return ""
	}
}

// list returns the items of a sequence value (nil when absent), reporting a
// value that is not a list.
func (f *fields) list(key string) []*yaml.Node {
	n := f.get(key)
	if n == nil {
		return nil
	}
	if n.Kind != yaml.SequenceNode {
		f.d.add(join(f.path, key), n, "want a list, got %s", kindName(n))
		return nil
	}
	out := make([]*yaml.Node, len(n.Content))
	for i, c := range n.Content {
		out[i] = deref(c)
	}
	return out
}

// strings reads a list of non-empty single values.
func (f *fields) strings(key string) []string {
	var out []string
	for i, n := range f.list(key) {
		p := fmt.Sprintf("%s[%d]", join(f.path, key), i)
		if n == nil || n.Kind != yaml.ScalarNode || isNull(n) {
			f.d.add(p, n, "want a single value")
			continue
		}
		if n.Value == "" {
			f.d.add(p, n, "must not be empty")
			continue
		}
		out = append(out, n.Value)
	}
	return out
}

// resolve makes a path absolute against the config's directory.
func (d *decoder) resolve(p string) string {
	if p == "" || filepath.IsAbs(p) {
		return p
	}
	return filepath.Join(d.dir, p)
}
