package config

import (
	"context"
	"errors"
	"fmt"
	"net"
	"net/url"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"time"
	_ "time/tzdata" // time zones validate the same on every host

	"github.com/robfig/cron/v3"
	"go.yaml.in/yaml/v3"
)

// Load reads and validates the configuration file at path. A file that does
// not parse as YAML gives a wrapped yaml error; a file with any invalid value
// gives a *ValidationError listing every problem.
func Load(path string) (*Config, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("config: %w", err)
	}
	return Parse(data, path)
}

// LoadContext is Load that gives up when ctx is done: a signal stops a
// command while its config is still being parsed (the decoder's own limits
// bound the work; this bounds the wait). The parse left running ends on its
// own and its result is dropped.
func LoadContext(ctx context.Context, path string) (*Config, error) {
	if err := ctx.Err(); err != nil {
		return nil, fmt.Errorf("config: %s: %w", path, err)
	}
	type result struct {
		c   *Config
		err error
	}
	ch := make(chan result, 1)
	go func() {
		c, err := Load(path)
		ch <- result{c, err}
	}()
	select {
	case r := <-ch:
		return r.c, r.err
	case <-ctx.Done():
		return nil, fmt.Errorf("config: %s: %w", path, ctx.Err())
	}
}

// Parse validates configuration bytes. name is used in messages and its
// directory resolves relative paths (token_file, source paths, strapping
// files, output paths); strapping table files are read during Parse.
func Parse(data []byte, name string) (*Config, error) {
	var doc yaml.Node
	if err := yaml.Unmarshal(data, &doc); err != nil {
		return nil, fmt.Errorf("config: %s: %w", name, err)
	}
	d := &decoder{dir: filepath.Dir(name), fromDefaults: map[*yaml.Node]bool{}, readFile: os.ReadFile}
	root := &doc
	if root.Kind == 0 { // no document at all
		root = nil
	} else if root.Kind == yaml.DocumentNode {
		if len(root.Content) == 0 {
			root = nil
		} else {
			root = root.Content[0]
		}
	}
	if isNull(deref(root)) {
		return nil, &ValidationError{File: name, Problems: []Problem{{Path: "(document)", Line: 1, Msg: "the file is empty"}}}
	}
	c := d.config(root)
	c.File = name
	if len(d.problems) > 0 {
		return nil, &ValidationError{File: name, Problems: sortProblems(d.problems)}
	}
	return c, nil
}

var idPattern = regexp.MustCompile(`^[A-Za-z0-9][A-Za-z0-9_.\-]*$`)

func (d *decoder) id(f *fields, key string) string {
	s := f.required(key)
	if s != "" && !idPattern.MatchString(s) {
		_, n, _ := f.scalar(key)
		d.add(join(f.path, key), n, "%q: use letters, digits, '_', '-' and '.', starting with a letter or digit", s)
	}
	return s
}

func (d *decoder) config(root *yaml.Node) *Config {
	c := &Config{}
	top := d.mapping(root, "")
	if top.has("version") {
		quantity(top, "version", 1, parseInt, func(v int) string {
			if v != 1 {
				return "only version 1 is known"
			}
			return ""
		})
	}
	for i, n := range top.list("sites") {
		c.Sites = append(c.Sites, d.site(n, fmt.Sprintf("sites[%d]", i)))
	}
	seenSite := map[string]int{}
	for i, s := range c.Sites {
		if j, dup := seenSite[s.ID]; dup && s.ID != "" {
			d.add(fmt.Sprintf("sites[%d].id", i), top.list("sites")[i], "site %q is already defined by sites[%d]", s.ID, j)
		}
		seenSite[s.ID] = i
	}

	defaults := top.get("defaults")
	if defaults != nil {
		markAll(deref(defaults), d.fromDefaults, 0)
		if dm := d.mapping(defaults, "defaults"); dm.has("id") {
			d.add("defaults.id", dm.get("id"), "a tank id cannot have a default")
		}
	}
	tankNodes := top.list("tanks")
	if len(tankNodes) == 0 {
		d.add("tanks", top.at(), "at least one tank is required")
	}
	seenTank := map[string]int{}
	for i, n := range tankNodes {
		path := fmt.Sprintf("tanks[%d]", i)
		if n == nil || n.Kind != yaml.MappingNode {
			d.add(path, n, "want a mapping of keys")
			continue
		}
		merged := d.mergeDefaults(deref(defaults), n, path)
		t := d.tank(merged, path, c)
		if j, dup := seenTank[t.ID]; dup && t.ID != "" {
			d.add(path+".id", n, "tank %q is already defined by tanks[%d]", t.ID, j)
		}
		seenTank[t.ID] = i
		c.Tanks = append(c.Tanks, t)
	}
	for i, n := range top.list("levels") {
		path := fmt.Sprintf("levels[%d]", i)
		if n == nil || n.Kind != yaml.MappingNode {
			d.add(path, n, "want a mapping of keys")
			continue
		}
		l := d.level(n, path, c)
		if j, dup := seenTank[l.ID]; dup && l.ID != "" {
			d.add(path+".id", n, "%q is already defined by tanks[%d]", l.ID, j)
		}
		for j, o := range c.Levels {
			if o.ID == l.ID && l.ID != "" {
				d.add(path+".id", n, "level %q is already defined by levels[%d]", l.ID, j)
			}
		}
		c.Levels = append(c.Levels, l)
	}
	d.links(c)
	c.Outputs = d.outputs(top.get("outputs"), "outputs")
	top.done()
	return c
}

// links checks every outlet.discharges_into: another tank of the same
// site, read the same way (both from files, or both from the site's
// InfluxDB, whose windows then carry both levels).
func sourceKind(format string) string {
	if format == "influx" {
		return "InfluxDB"
	}
	return "files"
}

func (d *decoder) links(c *Config) {
	for i, t := range c.Tanks {
		into := t.Outlet.DischargesInto
		if into == "" {
			continue
		}
		path := fmt.Sprintf("tanks[%d].outlet.discharges_into", i)
		n := d.linkNodes[i]
		what, site, format, found := "tank", "", "", true
		if r := c.Tank(into); r != nil {
			site, format = r.Site, r.Source.Format
		} else if l := c.Level(into); l != nil {
			what, site, format = "level", l.Site, l.Source.Format
		} else {
			found = false
		}
		switch {
		case into == t.ID:
			d.add(path, n, "a tank cannot discharge into itself")
		case !found:
			d.add(path, n, "no tank or level %q (a basin whose level is measured goes in levels)", into)
		case site != t.Site:
			d.add(path, n, "%s %q is on site %q, this tank on %q", what, into, site, t.Site)
		case (t.Source.Format == "influx") != (format == "influx"):
			d.add(path, n, "%s %q is read from %s, this tank from %s: linked vessels are both read from files or both from the site's InfluxDB",
				what, into, sourceKind(format), sourceKind(t.Source.Format))
		}
	}
}

// markAll records every node under n.
func markAll(n *yaml.Node, set map[*yaml.Node]bool, depth int) {
	if n == nil || depth > 50 || set[n] {
		return
	}
	set[n] = true
	for _, c := range n.Content {
		markAll(c, set, depth+1)
	}
	if n.Alias != nil {
		markAll(n.Alias, set, depth+1)
	}
}

// mergeDefaults returns a mapping with the tank's keys and, for every key the
// tank lacks, the default's; mappings present on both sides merge
// recursively. Lists and single values are replaced, not merged.
func (d *decoder) mergeDefaults(def, tank *yaml.Node, path string) *yaml.Node {
	return d.mergeNodes(def, tank, path, 0)
}

func (d *decoder) mergeNodes(def, over *yaml.Node, path string, depth int) *yaml.Node {
	def, over = deref(def), deref(over)
	if def == nil || def.Kind != yaml.MappingNode || over == nil || over.Kind != yaml.MappingNode || depth > 10 {
		if over == nil {
			return def
		}
		return over
	}
	out := &yaml.Node{Kind: yaml.MappingNode, Tag: "!!map", Line: over.Line, Column: over.Column}
	have := map[string]bool{}
	defs := map[string]entry{}
	for _, e := range d.entries(def, "defaults", depth) {
		defs[e.key.Value] = e
	}
	for _, e := range d.entries(over, path, depth) {
		have[e.key.Value] = true
		v := e.value
		if de, ok := defs[e.key.Value]; ok {
			v = d.mergeNodes(de.value, e.value, join(path, e.key.Value), depth+1)
		}
		out.Content = append(out.Content, e.key, v)
	}
	for _, e := range d.entries(def, "defaults", depth) {
		if !have[e.key.Value] {
			out.Content = append(out.Content, e.key, e.value)
		}
	}
	return out
}

func (d *decoder) site(n *yaml.Node, path string) Site {
	f := d.mapping(n, path)
	s := Site{ID: d.id(f, "id"), Description: f.str("description", ""), MailTo: f.strings("mail_to")}
	if f.has("influx") {
		s.Influx = d.influx(f.get("influx"), join(path, "influx"))
	}
	f.done()
	return s
}

func (d *decoder) influx(n *yaml.Node, path string) *Influx {
	f := d.mapping(n, path)
	in := &Influx{
		Org:                    f.str("org", ""),
		Bucket:                 f.required("bucket"),
		TokenEnv:               f.str("token_env", ""),
		TokenFile:              d.resolve(f.str("token_file", "")),
		Measurement:            f.str("measurement", "tank_level"),
		Field:                  f.str("field", "level"),
		TankTag:                f.str("tank_tag", "tank"),
		SiteTag:                f.str("site_tag", ""),
		QueryWindow:            quantity(f, "query_window", 24*time.Hour, ParseDuration, positiveDuration),
		Timeout:                quantity(f, "timeout", 30*time.Second, ParseDuration, positiveDuration),
		FitsMeasurement:        f.str("fits_measurement", "outlet_fit"),
		FindingsMeasurement:    f.str("findings_measurement", "outlet_finding"),
		TransitionsMeasurement: f.str("transitions_measurement", "outlet_finding_transition"),
		SettleDelay:            quantity(f, "settle_delay", 5*time.Minute, ParseDuration, nonNegativeDuration),
		Overlap:                quantity(f, "overlap", time.Hour, ParseDuration, nonNegativeDuration),
		QueryLanguage:          f.str("query_language", "flux"),
	}
	if l := in.QueryLanguage; l != "flux" && l != "influxql" {
		d.add(join(path, "query_language"), f.get("query_language"), "want flux or influxql (InfluxQL over the v1 /query API, for InfluxDB 3 or a server without Flux)")
	}
	for _, k := range []string{"token", "password", "api_token", "auth_token"} {
		if _, ok := f.vals[k]; ok {
			f.used[k] = true
			d.add(join(path, k), f.vals[k].key, "secrets are not allowed in the config file; name an environment variable with token_env or a file with token_file")
		}
	}
	if in.TokenEnv != "" && in.TokenFile != "" {
		d.add(join(path, "token_env"), f.get("token_env"), "give token_env or token_file, not both")
	}
	raw, un, ok := f.scalar("url")
	if un == nil {
		d.add(join(path, "url"), f.at(), "required")
	} else if ok {
		u, err := url.Parse(raw)
		switch {
		case err != nil || u.Host == "" || (u.Scheme != "http" && u.Scheme != "https"):
			d.add(join(path, "url"), un, "want an http:// or https:// URL with a host")
		case u.User != nil:
			d.add(join(path, "url"), un, "credentials are not allowed in the URL; use token_env or token_file")
		default:
			in.URL = raw
		}
	}
	for _, k := range []string{"measurement", "field", "tank_tag", "site_tag", "fits_measurement", "findings_measurement"} {
		if v, n, ok := f.scalar(k); ok && strings.TrimSpace(v) == "" {
			d.add(join(path, k), n, "must not be empty")
		}
	}
	f.done()
	return in
}

func (d *decoder) tank(n *yaml.Node, path string, c *Config) Tank {
	f := d.mapping(n, path)
	t := Tank{ID: d.id(f, "id"), Description: f.str("description", "")}
	site, sn, _ := f.scalar("site")
	switch {
	case site == "" && len(c.Sites) == 1:
		site = c.Sites[0].ID
	case site == "" && len(c.Sites) > 1:
		d.add(path+".site", f.at(), "required when there is more than one site")
	case site != "" && c.Site(site) == nil:
		d.add(path+".site", sn, "no site %q in sites", site)
	}
	t.Site = site
	t.BaseElevationM = quantity(f, "base_elevation", 0, ParseLength, nil)
	t.Geometry = d.geometry(f.get("geometry"), path+".geometry", f)
	d.linkNode = nil
	t.Outlet = d.outlet(f.get("outlet"), path+".outlet", f, t.Geometry.HeightM)
	if d.linkNode != nil {
		if d.linkNodes == nil {
			d.linkNodes = map[int]*yaml.Node{}
		}
		d.linkNodes[len(c.Tanks)] = d.linkNode
	}
	t.Sensor = d.sensor(f.get("sensor"), path+".sensor", f)
	t.Source = d.source(f.get("source"), path+".source", f)
	t.Detection = d.detection(f.get("detection"), path+".detection")
	if t.Source.Format == "influx" {
		if s := c.Site(site); s != nil && s.Influx == nil {
			d.add(path+".source.format", n, "site %q has no influx connection", site)
		} else if s == nil && site == "" {
			d.add(path+".source.format", n, "influx needs a site with an influx connection")
		}
	}
	f.done()
	return t
}

// level decodes one entry of levels: a measured level that is not a
// monitored tank (no geometry, outlet or detection; no inflow meter).
func (d *decoder) level(n *yaml.Node, path string, c *Config) Level {
	f := d.mapping(n, path)
	l := Level{ID: d.id(f, "id"), Description: f.str("description", "")}
	site, sn, _ := f.scalar("site")
	switch {
	case site == "" && len(c.Sites) == 1:
		site = c.Sites[0].ID
	case site == "" && len(c.Sites) > 1:
		d.add(path+".site", f.at(), "required when there is more than one site")
	case site != "" && c.Site(site) == nil:
		d.add(path+".site", sn, "no site %q in sites", site)
	}
	l.Site = site
	l.BaseElevationM = quantity(f, "base_elevation", 0, ParseLength, nil)
	if !f.has("height") {
		d.add(path+".height", f.at(), "required: the basin's depth, which its readings are checked against")
	}
	l.HeightM = quantity(f, "height", 0, ParseLength, positive)
	l.Sensor = d.sensor(f.get("sensor"), path+".sensor", f)
	if l.Sensor.Inflow != nil {
		d.add(path+".sensor.inflow", f.get("sensor"), "a level read for the outlets that discharge into it has no inflow meter")
	}
	l.Source = d.source(f.get("source"), path+".source", f)
	if l.Source.Format == "influx" {
		if s := c.Site(site); s != nil && s.Influx == nil {
			d.add(path+".source.format", n, "site %q has no influx connection", site)
		} else if s == nil && site == "" {
			d.add(path+".source.format", n, "influx needs a site with an influx connection")
		}
	}
	f.done()
	return l
}

// section reports a required mapping that is missing.
func (d *decoder) section(n *yaml.Node, path string, parent *fields) *fields {
	if n == nil {
		d.add(path, parent.at(), "required")
	}
	return d.mapping(n, path)
}

var shapeDims = map[Shape][]string{
	VerticalCylinder:   {"diameter", "height"},
	Rectangular:        {"length", "width", "height"},
	HorizontalCylinder: {"diameter", "length"},
	Sphere:             {"diameter"},
	ConeBottomCylinder: {"diameter", "height", "cone_height"},
	StrappingTable:     {},
}

func (d *decoder) geometry(n *yaml.Node, path string, parent *fields) Geometry {
	f := d.section(n, path, parent)
	shapes := []string{string(VerticalCylinder), string(Rectangular), string(HorizontalCylinder),
		string(Sphere), string(ConeBottomCylinder), string(StrappingTable)}
	var g Geometry
	g.Shape = Shape(f.oneOf("shape", "", shapes...))
	if n != nil && f.get("shape") == nil {
		d.add(path+".shape", f.at(), "required (one of %s)", strings.Join(shapes, ", "))
	}
	dims := map[string]*float64{"diameter": &g.DiameterM, "length": &g.LengthM, "width": &g.WidthM,
		"height": &g.HeightM, "cone_height": &g.ConeHeightM}
	need, known := shapeDims[g.Shape]
	for _, k := range []string{"diameter", "length", "width", "height", "cone_height"} {
		wanted := false
		for _, w := range need {
			wanted = wanted || w == k
		}
		switch {
		case !known:
			f.get(k) // shape already reported
		case wanted && !f.has(k):
			d.add(join(path, k), f.at(), "required for %s", g.Shape)
		case wanted:
			*dims[k] = quantity(f, k, 0, ParseLength, positive)
		case f.has(k):
			d.add(join(path, k), f.get(k), "does not apply to %s", g.Shape)
		}
	}
	switch g.Shape {
	case HorizontalCylinder, Sphere:
		g.HeightM = g.DiameterM
	case ConeBottomCylinder:
		if g.ConeHeightM > 0 && g.HeightM > 0 && g.ConeHeightM >= g.HeightM {
			d.add(path+".cone_height", f.get("cone_height"), "must be less than the height")
		}
	}
	hasPts, hasFile := f.has("points"), f.has("file")
	var at []where
	if g.Shape == StrappingTable {
		switch {
		case hasPts && hasFile:
			d.add(path+".points", f.get("points"), "give points or file, not both")
		case hasPts:
			g.Strapping, at = d.strappingPoints(f, path+".points")
		case hasFile:
			g.Strapping, at = d.strappingFile(f, path+".file")
		default:
			d.add(path+".points", f.at(), "a strapping table needs points or a file")
		}
		d.checkStrapping(g.Strapping, at, f)
		if len(g.Strapping) > 0 {
			g.HeightM = g.Strapping[len(g.Strapping)-1].LevelM
		}
	} else if known {
		for _, k := range []string{"points", "file"} {
			if f.has(k) {
				d.add(join(path, k), f.get(k), "applies to strapping_table only")
			}
		}
	}
	f.done()
	return g
}

// strappingPoints reads [["0 m", "0 m3"], ["0.5 m", "1.2 m3"], ...].
func (d *decoder) strappingPoints(f *fields, path string) ([]StrappingPoint, []where) {
	var pts []StrappingPoint
	var at []where
	for i, n := range f.list("points") {
		p := fmt.Sprintf("%s[%d]", path, i)
		if n == nil || n.Kind != yaml.SequenceNode || len(n.Content) != 2 {
			d.add(p, n, "want a pair [level, volume] such as [\"0.5 m\", \"1.2 m3\"]")
			continue
		}
		a, b := deref(n.Content[0]), deref(n.Content[1])
		if a == nil || b == nil || a.Kind != yaml.ScalarNode || b.Kind != yaml.ScalarNode {
			d.add(p, n, "want a pair [level, volume] such as [\"0.5 m\", \"1.2 m3\"]")
			continue
		}
		lv, err1 := ParseLength(a.Value)
		vol, err2 := ParseVolume(b.Value)
		if err1 != nil {
			d.add(p, a, "level: %v", err1)
		}
		if err2 != nil {
			d.add(p, b, "volume: %v", err2)
		}
		if err1 == nil && err2 == nil {
			pts = append(pts, StrappingPoint{lv, vol})
			at = append(at, where{p, n, ""})
		}
	}
	return pts, at
}

// where locates a strapping point for messages.
type where struct {
	path   string
	node   *yaml.Node
	prefix string // "file:line: " for a point from a file
}

// strappingFile reads a CSV whose header names the units, such as
// "level_m,volume_m3" or "level_mm,volume_US_gal", one point per row.
func (d *decoder) strappingFile(f *fields, path string) ([]StrappingPoint, []where) {
	name, n, _ := f.scalar("file")
	data, ok := d.tableFile(name, n, path, "strapping table")
	if !ok {
		return nil, nil
	}
	rows, probs := readTable(data, name, [2]column{{name: "level", units: lengthUnits}, {name: "volume", units: volumeUnits}})
	for _, p := range probs {
		d.add(path, n, "%s", p)
	}
	pts := make([]StrappingPoint, len(rows))
	at := make([]where, len(rows))
	for i, r := range rows {
		pts[i] = StrappingPoint{r.a, r.b}
		at[i] = where{path, n, fmt.Sprintf("%s:%d: ", name, r.line)}
	}
	return pts, at
}

// tableFile reads the table file named at node n (what names its kind).
func (d *decoder) tableFile(name string, n *yaml.Node, path, what string) ([]byte, bool) {
	data, err := d.readFile(d.resolve(name))
	if err != nil {
		if u := errors.Unwrap(err); u != nil {
			err = u
		}
		d.add(path, n, "cannot read the %s: %v", what, err)
		return nil, false
	}
	return data, true
}

func (d *decoder) checkStrapping(pts []StrappingPoint, at []where, f *fields) {
	if len(at) == 0 && f.get("points") == nil && f.get("file") == nil {
		return // already reported: neither given
	}
	if len(pts) < 2 {
		path, n := f.path+".points", f.get("points")
		if n == nil {
			path, n = f.path+".file", f.get("file")
		}
		d.add(path, n, "a strapping table needs at least 2 points")
		return
	}
	for i, p := range pts {
		w := at[i]
		if p.LevelM < 0 || p.VolumeM3 < 0 {
			d.add(w.path, w.node, "%slevel and volume must not be negative", w.prefix)
		}
		if i > 0 && p.LevelM <= pts[i-1].LevelM {
			d.add(w.path, w.node, "%slevels must increase strictly", w.prefix)
		}
		if i > 0 && p.VolumeM3 < pts[i-1].VolumeM3 {
			d.add(w.path, w.node, "%svolume falls as the level rises", w.prefix)
		}
	}
}

func (d *decoder) outlet(n *yaml.Node, path string, parent *fields, heightM float64) Outlet {
	f := d.section(n, path, parent)
	o := Outlet{
		DiameterM: quantity(f, "diameter", 0, ParseLength, positive),
		DesignCd:  quantity(f, "design_cd", 0, parseNumber, between(0, 1, true, false)),
		Kind:      f.oneOf("kind", "", "orifice", "short_tube", "valve"),
		KvM3h:     quantity(f, "kv", 0, parseNumber, positive),
	}
	if into, en, ok := f.scalar("discharges_into"); ok {
		o.DischargesInto, d.linkNode = into, en
	}
	switch s, en, ok := f.scalar("elevation"); {
	case en == nil && n != nil:
		d.add(path+".elevation", f.at(), `required: a length above the vessel bottom, or "unknown"`)
	case !ok:
	case s == "unknown":
	default:
		v, err := ParseLength(s)
		switch {
		case err != nil:
			d.add(path+".elevation", en, `%v (or "unknown")`, err)
		case v < 0:
			d.add(path+".elevation", en, "must not be negative")
		case heightM > 0 && v >= heightM:
			d.add(path+".elevation", en, "must be below the vessel height (%g m)", heightM)
		default:
			o.ElevationM, o.ElevationKnown = v, true
		}
	}
	f.done()
	return o
}

func (d *decoder) sensor(n *yaml.Node, path string, parent *fields) Sensor {
	f := d.section(n, path, parent)
	s := Sensor{
		Kind:        SensorKind(f.oneOf("kind", "", string(Depth), string(Pressure))),
		ZeroOffset:  quantity(f, "zero_offset", 0, parseNumber, nil),
		DensityKgM3: quantity(f, "density", WaterDensity, ParseDensity, between(0, 25000, true, false)),
		Damping:     quantity(f, "damping", 0, ParseDuration, nonNegativeDuration),
	}
	if n != nil && !f.has("kind") {
		d.add(path+".kind", f.at(), "required: depth or pressure")
	}
	unit, un, ok := f.scalar("unit")
	if n != nil && un == nil {
		d.add(path+".unit", f.at(), "required")
	}
	raw := f.has("calibration")
	switch {
	case raw:
		if ok && !readingLabel.MatchString(unit) {
			d.add(path+".unit", un, "%q: with a calibration, name the raw reading with letters such as mA, V or counts (no spaces, '/' or ',')", unit)
			ok = false
		}
		if ok {
			s.Unit = unit
		}
		s.Calibration = d.calibration(f.get("calibration"), path+".calibration", s.Kind, s.Unit)
		if zn := f.get("zero_offset"); zn != nil {
			d.add(path+".zero_offset", zn, "does not apply with a calibration: the calibration says what the empty vessel reads")
			s.ZeroOffset = 0
		}
		if sn := f.get("span"); sn != nil {
			d.add(path+".span", sn, "does not apply with a calibration (a percent reading with a calibration is converted by the calibration)")
		}
	case !ok:
	case s.Kind == Depth && (unit == "percent" || unit == "%"):
		s.Unit = "percent"
		s.SpanM = quantity(f, "span", 0, ParseLength, positive)
		if !f.has("span") {
			d.add(path+".span", un, "required for a percent sensor: the level at 100 %%")
		}
	case s.Kind == Depth:
		if fct, ok := lengthUnits[unit]; ok {
			s.Unit, s.UnitToSI = unit, fct
		} else {
			d.add(path+".unit", un, "unknown depth unit %q (want one of %s, percent)", unit, unitList(lengthUnits))
		}
	case s.Kind == Pressure:
		if fct, ok := pressureUnits[unit]; ok {
			s.Unit, s.UnitToSI = unit, fct
		} else {
			d.add(path+".unit", un, "unknown pressure unit %q (want one of %s)", unit, unitList(pressureUnits))
		}
	}
	if !raw && s.Unit != "percent" && f.has("span") {
		d.add(path+".span", f.get("span"), "applies to percent sensors only")
	}
	if f.has("inflow") {
		s.Inflow = d.inflow(f.get("inflow"), path+".inflow")
	}
	f.done()
	return s
}

// readingLabel is the name of a raw reading: a word that cannot be taken
// for a number or a unit fraction ("mA", "V", "counts", "%").
var readingLabel = regexp.MustCompile(`^[A-Za-zµ%][A-Za-z0-9µ%_.\-]*$`)

// calibration reads a raw sensor's calibration: gain (with offset), points
// or file. Values are lengths for depth sensors and pressures for pressure
// sensors; label is the sensor's unit ("" when it is missing or bad).
func (d *decoder) calibration(n *yaml.Node, path string, kind SensorKind, label string) *Calibration {
	f := d.mapping(n, path)
	c := &Calibration{}
	what, parse, units := "level", ParseLength, lengthUnits
	if kind == Pressure {
		what, parse, units = "pressure", ParsePressure, pressureUnits
	}
	forms := []string{}
	for _, k := range []string{"gain", "points", "file"} {
		if f.has(k) {
			forms = append(forms, k)
		}
	}
	if f.has("offset") && !f.has("gain") {
		d.add(path+".offset", f.get("offset"), "applies with gain only")
	}
	switch {
	case len(forms) == 0:
		if m := deref(n); m != nil && m.Kind == yaml.MappingNode {
			d.add(path, m, "give gain (and offset), points or file")
		}
		f.done()
		return c
	case len(forms) > 1:
		d.add(join(path, forms[1]), f.get(forms[1]), "give one of gain (with offset), points or file, not %s", strings.Join(forms, " and "))
		f.done()
		return c
	case kind == "":
		f.get("offset")
		f.done()
		return c // the kind is reported already; the values cannot be read
	}
	var at []where
	before := len(d.problems)
	switch forms[0] {
	case "gain":
		g, gn, _ := f.scalar("gain")
		if gn != nil && gn.Kind == yaml.ScalarNode {
			v, err := parseGain(g, label, what, parse)
			switch {
			case err != nil:
				d.add(path+".gain", gn, "%v", err)
			case v == 0:
				d.add(path+".gain", gn, "must not be 0")
			default:
				c.GainSI = v
			}
		}
		c.OffsetSI = quantity(f, "offset", 0, parse, nil)
		if c.GainSI == 0 {
			f.done()
			return nil
		}
	case "points":
		c.Points, at = d.calibrationPoints(f, path+".points", what, parse, label)
	case "file":
		name, fn, ok := f.scalar("file")
		if !ok {
			break
		}
		c.File = d.resolve(name)
		data, ok := d.tableFile(name, fn, path+".file", "calibration table")
		if !ok {
			break
		}
		rows, probs := readTable(data, name, [2]column{{name: "reading", label: label}, {name: what, units: units}})
		for _, p := range probs {
			d.add(path+".file", fn, "%s", p)
		}
		for _, r := range rows {
			c.Points = append(c.Points, CalibrationPoint{r.a, r.b})
			at = append(at, where{path + ".file", fn, fmt.Sprintf("%s:%d: ", name, r.line)})
		}
		if len(rows) == 0 && len(probs) > 0 {
			f.done()
			return nil
		}
	}
	if forms[0] != "gain" && !d.checkCalibration(c.Points, at, f, forms[0], what, len(d.problems) > before) {
		f.done()
		return nil
	}
	f.done()
	return c
}

// parseGain reads a gain such as "0.2 m", "0.2 m/mA" or "3.125 kPa/mA": the
// level or pressure per reading unit; a "/unit" must name the sensor's unit.
func parseGain(s, label, what string, parse func(string) (float64, error)) (float64, error) {
	if i := strings.LastIndex(s, "/"); i >= 0 {
		per := strings.TrimSpace(s[i+1:])
		if per != label {
			return 0, fmt.Errorf("gain %q is per %q, but the sensor's unit is %q (write the %s per reading unit, such as \"0.2 m/%s\")", s, per, label, what, label)
		}
		s = s[:i]
	}
	return parse(s)
}

// calibrationPoints reads [[4 mA, 0 m], [20 mA, 3.2 m], ...]; the reading may
// be a bare number or carry the sensor's unit.
func (d *decoder) calibrationPoints(f *fields, path, what string, parse func(string) (float64, error), label string) ([]CalibrationPoint, []where) {
	var pts []CalibrationPoint
	var at []where
	example := fmt.Sprintf("want a pair [reading, %s] such as [4 %s, 0 m]", what, label)
	if what == "pressure" {
		example = fmt.Sprintf("want a pair [reading, %s] such as [4 %s, 0 kPa]", what, label)
	}
	for i, n := range f.list("points") {
		p := fmt.Sprintf("%s[%d]", path, i)
		if n == nil || n.Kind != yaml.SequenceNode || len(n.Content) != 2 {
			d.add(p, n, "%s", example)
			continue
		}
		a, b := deref(n.Content[0]), deref(n.Content[1])
		if a == nil || b == nil || a.Kind != yaml.ScalarNode || b.Kind != yaml.ScalarNode {
			d.add(p, n, "%s", example)
			continue
		}
		r, u, err1 := splitQuantity(a.Value)
		if err1 == nil && u != "" && u != label {
			err1 = fmt.Errorf("%q is not in the sensor's unit %q", a.Value, label)
		}
		v, err2 := parse(b.Value)
		if err1 != nil {
			d.add(p, a, "reading: %v", err1)
		}
		if err2 != nil {
			d.add(p, b, "%s: %v", what, err2)
		}
		if err1 == nil && err2 == nil {
			pts = append(pts, CalibrationPoint{r, v})
			at = append(at, where{p, n, ""})
		}
	}
	return pts, at
}

// checkCalibration reports a table with fewer than 2 points (unless rows
// were already reported) or whose readings or values are not strictly
// monotone (each direction set by its first two points); it returns whether
// the points are usable.
func (d *decoder) checkCalibration(pts []CalibrationPoint, at []where, f *fields, key, what string, rowsReported bool) bool {
	if len(pts) < 2 {
		if !rowsReported {
			d.add(join(f.path, key), f.get(key), "a calibration table needs at least 2 points")
		}
		return false
	}
	si := "m"
	if what == "pressure" {
		si = "Pa"
	}
	dir := func(a, b float64) string {
		if b > a {
			return "increasing"
		}
		return "decreasing"
	}
	good := true
	rDir, vDir := dir(pts[0].Reading, pts[1].Reading), dir(pts[0].ValueSI, pts[1].ValueSI)
	for i := 1; i < len(pts); i++ {
		p, q, w := pts[i-1], pts[i], at[i]
		if q.Reading == p.Reading || dir(p.Reading, q.Reading) != rDir {
			d.add(w.path, w.node, "%sreadings must be strictly monotone: %g after %g breaks the %s order set by the first two points", w.prefix, q.Reading, p.Reading, rDir)
			good = false
		}
		if q.ValueSI == p.ValueSI || dir(p.ValueSI, q.ValueSI) != vDir {
			d.add(w.path, w.node, "%s%ss must be strictly monotone: %g %s after %g %s breaks the %s order set by the first two points", w.prefix, what, q.ValueSI, si, p.ValueSI, si, vDir)
			good = false
		}
	}
	return good
}

func (d *decoder) inflow(n *yaml.Node, path string) *InflowMeter {
	f := d.mapping(n, path)
	m := &InflowMeter{Field: f.str("field", "inflow")}
	unit, un, ok := f.scalar("unit")
	switch {
	case un == nil:
		d.add(path+".unit", f.at(), "required")
	case ok:
		if fct, known := flowUnits[unit]; known {
			m.Unit, m.ToSI = unit, fct
		} else {
			d.add(path+".unit", un, "unknown flow unit %q (want one of %s)", unit, unitList(flowUnits))
		}
	}
	f.done()
	return m
}

func (d *decoder) source(n *yaml.Node, path string, parent *fields) Source {
	f := d.section(n, path, parent)
	s := Source{
		Format:      f.oneOf("format", "", "csv", "line_protocol", "influx"),
		Measurement: f.str("measurement", "tank_level"),
		Field:       f.str("field", "level"),
		TankTag:     f.str("tank_tag", "tank"),
		Precision:   f.oneOf("precision", "auto", "auto", "s", "ms", "us", "ns"),
	}
	if n != nil && !f.has("format") {
		d.add(path+".format", f.at(), "required: csv, line_protocol or influx")
	}
	for _, p := range f.strings("paths") {
		if _, err := filepath.Match(p, ""); err != nil {
			d.add(path+".paths", f.get("paths"), "bad pattern %q: %v", p, err)
			continue
		}
		s.Paths = append(s.Paths, d.resolve(p))
	}
	switch s.Format {
	case "csv", "line_protocol":
		if !f.has("paths") {
			d.add(path+".paths", f.at(), "required for %s: a list of files or globs", s.Format)
		}
	case "influx":
		// Paths inherited from the defaults block are simply not used.
		if pn := f.get("paths"); pn != nil && !d.fromDefaults[pn] {
			d.add(path+".paths", pn, "does not apply to influx (the site's connection is used)")
		}
		s.Paths = nil
	}
	f.done()
	return s
}

func (d *decoder) detection(n *yaml.Node, path string) Detection {
	f := d.mapping(n, path)
	det := Detection{
		BaselineDrains: quantity(f, "baseline_drains", 8, parseInt, func(v int) string {
			if v < 3 {
				return "must be at least 3"
			}
			return ""
		}),
		DesignKM25s:         quantity(f, "design_k", 0, ParseOutletConstant, positive),
		FalseAlarmInterval:  quantity(f, "false_alarm_interval", 10*JulianYearS*time.Second, ParseDuration, positiveDuration),
		CusumK:              quantity(f, "cusum_k", 0.5, parseNumber, positive),
		EWMALambda:          quantity(f, "ewma_lambda", 0.1, parseNumber, between(0, 1, true, false)),
		MaintenanceFraction: quantity(f, "maintenance_fraction", 0.8, parseNumber, between(0, 1, true, true)),
		MinDropM:            quantity(f, "min_drop", 0.05, ParseLength, positive),
		MinDrainDuration:    quantity(f, "min_drain_duration", 2*time.Minute, ParseDuration, positiveDuration),
		Transient:           quantity(f, "transient", 30*time.Second, ParseDuration, nonNegativeDuration),
		Settle:              quantity(f, "settle", 5*time.Minute, ParseDuration, nonNegativeDuration),
		GapLimit:            quantity(f, "gap_limit", 5*time.Minute, ParseDuration, positiveDuration),
		FeedSilentLimit:     quantity(f, "feed_silent_limit", 4*time.Hour, ParseDuration, positiveDuration),
	}
	f.done()
	return det
}

func (d *decoder) mail(n *yaml.Node, path string) *MailSettings {
	f := d.mapping(n, path)
	m := &MailSettings{Host: f.required("host"), Port: quantity(f, "port", 587, parseInt, func(p int) string {
		if p < 1 || p > 65535 {
			return "want a TCP port, 1-65535"
		}
		return ""
	}), TLS: f.oneOf("tls", "starttls", "starttls", "opportunistic", "implicit", "none"),
		CAFile: d.resolve(f.str("ca_file", "")), Username: f.str("username", ""), From: f.required("from"), To: f.strings("to")}
	m.PasswordEnv, m.PasswordFile = d.secretKeys(f, path, "password")
	if m.Username != "" && m.PasswordEnv == "" && m.PasswordFile == "" {
		d.add(path+".username", f.get("username"), "give password_env or password_file with it (the password is never in the config)")
	}
	f.done()
	return m
}

func (d *decoder) outputs(n *yaml.Node, path string) Outputs {
	f := d.mapping(n, path)
	o := Outputs{
		Directory:    d.resolve(f.str("directory", "out")),
		ScanSchedule: f.str("scan_schedule", "*/15 * * * *"),
	}
	o.StateFile = d.resolve(f.str("state_file", ""))
	if o.StateFile == "" {
		o.StateFile = filepath.Join(o.Directory, "state.db")
	}
	o.NewState = quantity(f, "new_state", false, parseBool, nil)
	if err := checkCron(o.ScanSchedule); err != nil {
		d.add(path+".scan_schedule", f.get("scan_schedule"), "%v", err)
	}
	rf := d.mapping(f.get("report"), path+".report")
	o.Report.Schedule = rf.str("schedule", "0 6 * * 1")
	if err := checkCron(o.Report.Schedule); err != nil {
		d.add(path+".report.schedule", rf.get("schedule"), "%v", err)
	}
	o.Report.TimeZone = rf.str("time_zone", "UTC")
	if loc, err := time.LoadLocation(o.Report.TimeZone); err != nil || o.Report.TimeZone == "" {
		d.add(path+".report.time_zone", rf.get("time_zone"), "unknown time zone %q (want an IANA name such as Europe/Berlin)", o.Report.TimeZone)
	} else {
		o.Report.Location = loc
	}
	rf.done()

	af := d.mapping(f.get("alert"), path+".alert")
	o.Alert.Log = quantity(af, "log", true, parseBool, nil)
	o.Alert.WebhookURLEnv = af.str("webhook_url_env", "")
	if raw, un, ok := af.scalar("webhook_url"); ok {
		u, err := url.Parse(raw)
		if err != nil || u.Host == "" || (u.Scheme != "http" && u.Scheme != "https") {
			// The URL itself is not repeated: it often carries a secret.
			d.add(path+".alert.webhook_url", un, "want an http:// or https:// URL with a host")
		} else {
			o.Alert.WebhookURL = raw
		}
		if o.Alert.WebhookURLEnv != "" {
			d.add(path+".alert.webhook_url", un, "give webhook_url or webhook_url_env, not both")
		}
	}
	o.Alert.SecretEnv, o.Alert.SecretFile = d.secretKeys(af, path+".alert", "webhook_secret")
	if cn := af.get("command"); cn != nil && cn.Kind == yaml.ScalarNode {
		d.add(path+".alert.command", cn, "want a list: the program and its arguments (no shell)")
	} else {
		o.Alert.Command = af.strings("command")
	}
	if af.has("mail") {
		o.Alert.Mail = d.mail(af.get("mail"), path+".alert.mail")
	}
	af.done()

	df := d.mapping(f.get("delivery"), path+".delivery")
	o.Delivery.RetryMin = quantity(df, "retry_min", time.Minute, ParseDuration, nonNegativeDuration)
	o.Delivery.RetryMax = quantity(df, "retry_max", time.Hour, ParseDuration, nonNegativeDuration)
	o.Delivery.ExpireAfter = quantity(df, "expire_after", 30*24*time.Hour, ParseDuration, positiveDuration)
	if o.Delivery.RetryMax < o.Delivery.RetryMin {
		d.add(path+".delivery.retry_max", df.get("retry_max"), "retry_max %v is shorter than retry_min %v", o.Delivery.RetryMax, o.Delivery.RetryMin)
	}
	df.done()

	hf := d.mapping(f.get("http"), path+".http")
	o.HTTP.Address = hf.str("address", "127.0.0.1:9470")
	if a := o.HTTP.Address; a != "off" {
		if _, _, err := net.SplitHostPort(a); err != nil {
			d.add(path+".http.address", hf.get("address"), "want host:port (127.0.0.1:9470 keeps it on this machine), or off: %v", err)
		}
	}
	o.HTTP.TokenEnv, o.HTTP.TokenFile = d.secretKeys(hf, path+".http", "token")
	hf.done()
	f.done()
	return o
}

// secretKeys reads the keys that name where a secret comes from, name_env
// and name_file (not both), and refuses the secret itself under name.
func (d *decoder) secretKeys(f *fields, path, name string) (env, file string) {
	env, file = f.str(name+"_env", ""), d.resolve(f.str(name+"_file", ""))
	if env != "" && file != "" {
		d.add(join(path, name+"_env"), f.get(name+"_env"), "give %s_env or %s_file, not both", name, name)
	}
	if _, _, ok := f.scalar(name); ok {
		d.add(join(path, name), f.get(name), "secrets are not allowed in the config file; name an environment variable with %s_env or a file with %s_file", name, name)
	}
	return env, file
}

// checkCron validates a schedule with the standard parser (5 fields or a
// descriptor, optionally after CRON_TZ=zone). cron v3.0.1 panics on a zone
// prefix with nothing after it, so that case is refused first and any other
// panic is recovered.
func checkCron(spec string) (err error) {
	if strings.HasPrefix(spec, "CRON_TZ=") || strings.HasPrefix(spec, "TZ=") {
		if !strings.Contains(spec, " ") {
			return fmt.Errorf("schedule %q: a time zone prefix must be followed by a schedule", spec)
		}
	}
	defer func() {
		if r := recover(); r != nil {
			err = fmt.Errorf("schedule %q is not valid", spec)
		}
	}()
	if _, err := cron.ParseStandard(spec); err != nil {
		return fmt.Errorf("schedule %q: %v", spec, err)
	}
	return nil
}
