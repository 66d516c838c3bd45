package ingest

import (
	"fmt"
	"sort"
	"strings"
)

// ProblemKind names one kind of data problem found while reading.
type ProblemKind string

// The problem kinds. Every input line that is not a sample, a header, a
// comment, a blank line or a line of another series is counted under exactly
// one of them.
const (
	// OutOfOrder: the time is before the previous accepted sample of the same tank.
	OutOfOrder ProblemKind = "out_of_order"
	// DuplicateTime: the time equals the previous accepted sample of the same tank.
	DuplicateTime ProblemKind = "duplicate_time"
	// NaN: the value is NaN or infinite.
	NaN ProblemKind = "nan"
	// EmptyValue: the value field is present but empty.
	EmptyValue ProblemKind = "empty_value"
	// Truncated: the last line of a file ends without a newline and does not
	// parse, or a compressed stream ends early or fails its checksum.
	Truncated ProblemKind = "truncated"
	// Malformed: the line does not parse (bad number, bad time, wrong field
	// count, missing tag or timestamp, line too long, non-numeric field).
	Malformed ProblemKind = "malformed"
	// UnknownTank: the tank is not among the tanks being read.
	UnknownTank ProblemKind = "unknown_tank"
	// OutOfRange: the reading converts to a level outside the tank
	// (Conversion.MinHeadM, MaxHeadM), or to no level at all.
	OutOfRange ProblemKind = "out_of_range"
)

// Kinds lists every ProblemKind in a fixed order (the order of Report.String).
var Kinds = []ProblemKind{OutOfOrder, DuplicateTime, NaN, EmptyValue, Truncated, Malformed, UnknownTank, OutOfRange}

// MaxExamples is how many problems of each kind a Report keeps as examples.
const MaxExamples = 5

// Problem is one skipped line.
type Problem struct {
	File string
	Line int64 // 1-based line number in the (decompressed) file
	Kind ProblemKind
	Text string // what was wrong, with a short excerpt of the input
}

func (p Problem) String() string {
	return fmt.Sprintf("%s:%d: %s: %s", p.File, p.Line, p.Kind, p.Text)
}

// Report accounts for every line read. After a read of files without an
// inflow field,
//
//	Lines == Ignored + Foreign + Samples + Σ Counts
//
// With ReadOptions.InflowField, a line carrying both fields counts once as
// above and, when its inflow reading is bad or out of order, once more under
// that problem's kind. A Report is a plain value, not safe for concurrent use.
type Report struct {
	Files         int
	Lines         int64 // lines read, including headers, comments and blank lines
	Ignored       int64 // headers, comments and blank lines
	Foreign       int64 // line protocol lines of another measurement, or without the level field
	Samples       int64 // level samples accepted
	InflowSamples int64 // inflow meter readings accepted (line protocol only)
	Counts        map[ProblemKind]int64
	Examples      []Problem // the first MaxExamples problems of each kind, in reading order
}

// Problems returns the total number of problems of every kind.
func (r *Report) Problems() int64 {
	var n int64
	for _, c := range r.Counts {
		n += c
	}
	return n
}

// add counts one problem and keeps it as an example if there are fewer than
// MaxExamples of its kind so far.
func (r *Report) add(p Problem) {
	if r.Counts == nil {
		r.Counts = make(map[ProblemKind]int64)
	}
	r.Counts[p.Kind]++
	if r.Counts[p.Kind] <= MaxExamples {
		r.Examples = append(r.Examples, p)
	}
}

// Merge adds the counts of o to r and keeps o's examples while r has fewer
// than MaxExamples of that kind.
func (r *Report) Merge(o Report) {
	r.Files += o.Files
	r.Lines += o.Lines
	r.Ignored += o.Ignored
	r.Foreign += o.Foreign
	r.Samples += o.Samples
	r.InflowSamples += o.InflowSamples
	kept := make(map[ProblemKind]int)
	for _, p := range r.Examples {
		kept[p.Kind]++
	}
	for _, p := range o.Examples {
		if kept[p.Kind] < MaxExamples {
			r.Examples = append(r.Examples, p)
			kept[p.Kind]++
		}
	}
	for k, c := range o.Counts {
		if r.Counts == nil {
			r.Counts = make(map[ProblemKind]int64)
		}
		r.Counts[k] += c
	}
}

// String renders the report for people: one summary line, then one line per
// problem kind that occurred, each followed by its examples.
func (r Report) String() string {
	var b strings.Builder
	fmt.Fprintf(&b, "%d files, %d lines: %d samples", r.Files, r.Lines, r.Samples)
	if r.InflowSamples > 0 {
		fmt.Fprintf(&b, ", %d inflow readings", r.InflowSamples)
	}
	fmt.Fprintf(&b, ", %d ignored, %d of other series, %d problems\n", r.Ignored, r.Foreign, r.Problems())
	kinds := append([]ProblemKind(nil), Kinds...)
	for k := range r.Counts { // kinds added by a future version still show
		if !knownKind(k) {
			kinds = append(kinds, k)
		}
	}
	sort.SliceStable(kinds[len(Kinds):], func(i, j int) bool { return kinds[len(Kinds)+i] < kinds[len(Kinds)+j] })
	for _, k := range kinds {
		c := r.Counts[k]
		if c == 0 {
			continue
		}
		fmt.Fprintf(&b, "  %s: %d\n", k, c)
		for _, p := range r.Examples {
			if p.Kind == k {
				fmt.Fprintf(&b, "    %s:%d: %s\n", p.File, p.Line, p.Text)
			}
		}
	}
	return b.String()
}

func knownKind(k ProblemKind) bool {
	for _, q := range Kinds {
		if q == k {
			return true
		}
	}
	return false
}

// excerpt quotes at most 60 bytes of b for a problem text.
func excerpt(b []byte) string {
	const max = 60
	if len(b) > max {
		return fmt.Sprintf("%q...", b[:max])
	}
	return fmt.Sprintf("%q", b)
}
