package influx

import (
	"fmt"
	"regexp"
	"slices"
	"strings"
	"time"
	"unicode"
	"unicode/utf8"
)

// fluxString returns s as a Flux string literal. Flux 0.65 interpolates
// "${expr}" inside string literals, so "${" is escaped as well as '\' and '"';
// control characters become \n, \r, \t or \xNN so the literal stays on one
// line. Invalid UTF-8 bytes are written as \xNN too.
func fluxString(s string) string {
	var b strings.Builder
	b.Grow(len(s) + 2)
	b.WriteByte('"')
	for i := 0; i < len(s); {
		r, w := utf8.DecodeRuneInString(s[i:])
		switch {
		case r == utf8.RuneError && w == 1:
			fmt.Fprintf(&b, `\x%02x`, s[i])
		case r == '\\':
			b.WriteString(`\\`)
		case r == '"':
			b.WriteString(`\"`)
		case r == '$' && strings.HasPrefix(s[i+w:], "{"):
			b.WriteString(`\$`)
		case r == '\n':
			b.WriteString(`\n`)
		case r == '\r':
			b.WriteString(`\r`)
		case r == '\t':
			b.WriteString(`\t`)
		case r < 0x20 || r == 0x7f:
			fmt.Fprintf(&b, `\x%02x`, r)
		default:
			b.WriteString(s[i : i+w])
		}
		i += w
	}
	b.WriteByte('"')
	return b.String()
}

// fluxRegexQuote quotes s for use inside a Flux regex literal: the RE2
// metacharacters via regexp.QuoteMeta, '/' (the literal's delimiter) as \/,
// and non-printable runes as \x{hex} because the literal cannot span lines.
func fluxRegexQuote(s string) string {
	var b strings.Builder
	for _, r := range regexp.QuoteMeta(s) {
		switch {
		case r == '/':
			b.WriteString(`\/`)
		case r == utf8.RuneError || !unicode.IsPrint(r):
			fmt.Fprintf(&b, `\x{%x}`, r)
		default:
			b.WriteRune(r)
		}
	}
	return b.String()
}

// fluxRegexAnyOf returns a Flux regex literal that matches exactly one of vals:
// /^(a|b\.c)$/. Storage push-down on 1.8 handles a regex on a tag, unlike
// contains().
func fluxRegexAnyOf(vals []string) string {
	parts := make([]string, len(vals))
	for i, v := range vals {
		parts[i] = fluxRegexQuote(v)
	}
	return "/^(" + strings.Join(parts, "|") + ")$/"
}

var fluxIdent = regexp.MustCompile(`^[A-Za-z_][A-Za-z0-9_]*$`)

// fluxColumn returns the record member expression for column name: r.name for
// plain identifiers, r["..."] otherwise.
func fluxColumn(name string) string {
	if fluxIdent.MatchString(name) && !fluxKeyword(name) {
		return "r." + name
	}
	return "r[" + fluxString(name) + "]"
}

func fluxKeyword(s string) bool {
	switch s {
	case "and", "or", "not", "empty", "in", "import", "package", "return", "option", "builtin", "test", "if", "then", "else", "exists":
		return true
	}
	return false
}

// fluxTime formats a Unix-nanosecond time as a Flux time literal (RFC 3339,
// UTC, nanoseconds kept).
func fluxTime(ns int64) string {
	return time.Unix(0, ns).UTC().Format(time.RFC3339Nano)
}

// pullFlux builds the query of one window. tanks nil or empty means every
// tank of the measurement.
func (s *Source) pullFlux(tanks []string, startNs, stopNs int64) string {
	var b strings.Builder
	s.fluxSelect(&b, startNs, stopNs, fmt.Sprintf("r._field == %s", fluxString(s.spec.Field)), tanks)
	tag := fluxString(s.spec.TankTag)
	fmt.Fprintf(&b, "  |> group(columns: [%s])\n", tag)
	b.WriteString("  |> sort(columns: [\"_time\"])\n")
	fmt.Fprintf(&b, "  |> keep(columns: [\"_time\", \"_value\", %s])\n", tag)
	return b.String()
}

// pullInflowFlux builds the query of one window for PullWithInflow: both
// fields, pivoted on _field right after the filters (which 1.8 pushes down
// into the storage read, so the pivot follows the read directly and 1.8's
// sorted-pivot path applies). The pivoted value columns are named after the
// fields; keep() ignores a column no table has.
func (s *Source) pullInflowFlux(tanks []string, startNs, stopNs int64) string {
	var b strings.Builder
	level, inflow := fluxString(s.spec.Field), fluxString(s.spec.InflowField)
	s.fluxSelect(&b, startNs, stopNs, fmt.Sprintf("(r._field == %s or r._field == %s)", level, inflow), tanks)
	b.WriteString("  |> pivot(rowKey: [\"_time\"], columnKey: [\"_field\"], valueColumn: \"_value\")\n")
	tag := fluxString(s.spec.TankTag)
	fmt.Fprintf(&b, "  |> group(columns: [%s])\n", tag)
	b.WriteString("  |> sort(columns: [\"_time\"])\n")
	fmt.Fprintf(&b, "  |> keep(columns: [\"_time\", %s, %s, %s])\n", tag, level, inflow)
	return b.String()
}

// fluxSelect writes from, range and the filters on measurement, field (the
// given condition), tanks and tags.
func (s *Source) fluxSelect(b *strings.Builder, startNs, stopNs int64, fieldCond string, tanks []string) {
	fmt.Fprintf(b, "from(bucket: %s)\n", fluxString(s.bucket))
	fmt.Fprintf(b, "  |> range(start: %s, stop: %s)\n", fluxTime(startNs), fluxTime(stopNs))
	fmt.Fprintf(b, "  |> filter(fn: (r) => r._measurement == %s and %s)\n", fluxString(s.spec.Measurement), fieldCond)
	var conds []string
	if len(tanks) > 0 {
		ts := slices.Clone(tanks)
		slices.Sort(ts)
		ts = slices.Compact(ts)
		conds = append(conds, fmt.Sprintf("%s =~ %s", fluxColumn(s.spec.TankTag), fluxRegexAnyOf(ts)))
	}
	keys := make([]string, 0, len(s.spec.Tags))
	for k := range s.spec.Tags {
		keys = append(keys, k)
	}
	slices.Sort(keys)
	for _, k := range keys {
		conds = append(conds, fmt.Sprintf("%s == %s", fluxColumn(k), fluxString(s.spec.Tags[k])))
	}
	if len(conds) > 0 {
		fmt.Fprintf(b, "  |> filter(fn: (r) => %s)\n", strings.Join(conds, " and "))
	}
}
