package ingest

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"path/filepath"
	"sort"
	"strings"
	"time"

	"drainsight/model"
)

// Format is the layout of a level file.
type Format int

const (
	// FormatAuto picks the format from the file name: .csv is CSV; .lp, .line
	// and .txt are line protocol (each optionally followed by .gz).
	FormatAuto Format = iota
	// FormatCSV is a CSV file with a header naming time, tank and value.
	FormatCSV
	// FormatLineProtocol is InfluxDB line protocol.
	FormatLineProtocol
)

func (f Format) String() string {
	switch f {
	case FormatAuto:
		return "auto"
	case FormatCSV:
		return "csv"
	case FormatLineProtocol:
		return "line_protocol"
	}
	return fmt.Sprintf("Format(%d)", int(f))
}

// ParseFormat reads "csv", "line_protocol" (or "lp") and "auto".
func ParseFormat(s string) (Format, error) {
	switch s {
	case "", "auto":
		return FormatAuto, nil
	case "csv":
		return FormatCSV, nil
	case "line_protocol", "lp":
		return FormatLineProtocol, nil
	}
	return 0, fmt.Errorf("ingest: unknown format %q (want csv or line_protocol)", s)
}

// formatOf resolves FormatAuto from a file name.
func formatOf(path string, f Format) (Format, error) {
	if f != FormatAuto {
		return f, nil
	}
	switch filepath.Ext(strings.TrimSuffix(path, ".gz")) {
	case ".csv":
		return FormatCSV, nil
	case ".lp", ".line", ".txt":
		return FormatLineProtocol, nil
	}
	return 0, fmt.Errorf("ingest: %s: cannot tell the format from the name; set it", path)
}

// ReadOptions tune the readers. The zero value reads CSV with times by
// magnitude, and line protocol of any measurement with the field "level",
// the tag "tank" and nanosecond timestamps.
type ReadOptions struct {
	// Precision is the unit of numeric times. PrecisionAuto (default): CSV
	// decides each value by the magnitude of its integer part (below 1e11
	// seconds, below 1e14 milliseconds, below 1e17 microseconds, else
	// nanoseconds; right for every time from 1973 to 5138), and line protocol
	// uses nanoseconds. CSV times may also be RFC 3339 ("2024-03-01T12:00:00Z",
	// any offset, fractions to the nanosecond); numeric CSV times may carry a
	// decimal fraction.
	Precision Precision
	// Measurement is the line protocol measurement to read; "" reads all.
	// Lines of other measurements are counted in Report.Foreign.
	Measurement string
	// Field is the line protocol field holding the reading; default "level".
	Field string
	// TankTag is the line protocol tag naming the tank; default "tank".
	TankTag string
	// InflowField is the line protocol field of an inflow meter; "" reads
	// none. Its readings go to OnInflow, ordered per tank like the levels.
	InflowField string
	// OnInflow receives the inflow readings (raw, in the meter's unit).
	OnInflow func(tank string, tNs int64, value float64)
	// Tanks, when not nil, lists the tanks to read; samples of any other tank
	// are counted as unknown_tank.
	Tanks map[string]bool
	// Convert, when not nil, turns each level reading of a known tank
	// into the value delivered (a head); a non-empty problem says why the
	// reading is out of range (counted as OutOfRange with its file and
	// line, not delivered). StreamSeries sets it from the Conversions.
	Convert func(tank string, value float64) (float64, string)
	// MaxLineBytes is the longest line accepted; longer lines are skipped and
	// counted as malformed. 0 means DefaultMaxLineBytes (1 MiB).
	MaxLineBytes int
}

// order remembers the last accepted time per tank (and per inflow meter) and
// interns tank names, across the files of one read.
type order struct {
	lastNs   map[string]int64
	lastFlow map[string]int64
	names    map[string]string
}

func newOrder() *order {
	return &order{lastNs: map[string]int64{}, lastFlow: map[string]int64{}, names: map[string]string{}}
}

func (o *order) intern(b []byte) string {
	if s, ok := o.names[string(b)]; ok {
		return s
	}
	s := string(b)
	o.names[s] = s
	return s
}

// check tells whether tNs is after the last accepted time in last[tank], and
// records it when it is.
func check(last map[string]int64, tank string, tNs int64) (ProblemKind, string) {
	prev, seen := last[tank]
	switch {
	case !seen || tNs > prev:
		last[tank] = tNs
		return "", ""
	case tNs == prev:
		return DuplicateTime, fmt.Sprintf("tank %q: time %s repeated", tank, fmtNs(tNs))
	default:
		return OutOfOrder, fmt.Sprintf("tank %q: time %s before %s", tank, fmtNs(tNs), fmtNs(prev))
	}
}

func fmtNs(t int64) string { return time.Unix(0, t).UTC().Format(time.RFC3339Nano) }

// ReadFile streams one file (gzip-compressed when the name ends in .gz) and
// calls sink for every accepted sample, in file order. Per tank, a sample
// whose time is not after the previous accepted one is skipped and counted
// (out_of_order or duplicate_time), so each tank's times reach sink strictly
// increasing. Every other skipped line is counted too; see Report.
//
// ReadFile returns an error only when the file cannot be opened or read, its
// CSV header is missing or bad, or ctx ends; data problems go to the Report.
func ReadFile(ctx context.Context, path string, format Format, opt ReadOptions, sink func(tank string, tNs int64, value float64)) (Report, error) {
	return readFile(ctx, path, format, opt, newOrder(), sink)
}

func readFile(ctx context.Context, path string, format Format, opt ReadOptions, ord *order, sink func(tank string, tNs int64, value float64)) (Report, error) {
	rep := Report{Files: 1}
	format, err := formatOf(path, format)
	if err != nil {
		return rep, err
	}
	src, err := openSource(path)
	if err != nil {
		return rep, err
	}
	defer src.Close()
	lr := newLineReader(src, opt.MaxLineBytes)

	if opt.Field == "" {
		opt.Field = "level"
	}
	if opt.TankTag == "" {
		opt.TankTag = "tank"
	}
	var cp csvParser
	lp := lpParser{measurement: opt.Measurement, field: opt.Field, inflowField: opt.InflowField,
		tankTag: opt.TankTag, prec: opt.Precision}
	if lp.prec == PrecisionAuto {
		lp.prec = PrecisionNs
	}
	problem := func(kind ProblemKind, text string) {
		rep.add(Problem{File: path, Line: lr.n, Kind: kind, Text: text})
	}
	// Consecutive lines usually name the same tank: its name, interned,
	// and whether it is read are kept from the line before.
	var lastB []byte
	var lastTank string
	haveLast, lastKnown := false, false
	accept := func(tankB []byte, tNs int64, v float64) {
		var tank string
		if haveLast && bytes.Equal(tankB, lastB) {
			if !lastKnown {
				problem(UnknownTank, fmt.Sprintf("tank %q is not configured", tankB))
				return
			}
			tank = lastTank
		} else {
			// Unknown names are counted, never interned: memory stays
			// flat whatever the input holds.
			known := opt.Tanks == nil || opt.Tanks[string(tankB)]
			lastB, haveLast, lastKnown = append(lastB[:0], tankB...), true, known
			if !known {
				problem(UnknownTank, fmt.Sprintf("tank %q is not configured", tankB))
				return
			}
			tank = ord.intern(tankB)
			lastTank = tank
		}
		if opt.Convert != nil {
			var text string
			if v, text = opt.Convert(tank, v); text != "" {
				problem(OutOfRange, fmt.Sprintf("tank %q: %s", tank, text))
				return
			}
		}
		if kind, text := check(ord.lastNs, tank, tNs); kind != "" {
			problem(kind, text)
			return
		}
		rep.Samples++
		sink(tank, tNs, v)
	}

	// lpAccept takes a parsed line protocol line: its inflow reading, if
	// any, then its level sample.
	lpAccept := func(r lpResult) {
		if r.inflowKind != "" {
			problem(r.inflowKind, r.inflowText)
		}
		known := opt.Tanks == nil || opt.Tanks[string(r.tank)]
		var tank string
		if known {
			tank = ord.intern(r.tank)
		}
		if r.hasInflow && known && opt.OnInflow != nil {
			if k, t := check(ord.lastFlow, tank, r.tNs); k != "" {
				problem(k, "inflow: "+t)
			} else {
				rep.InflowSamples++
				opt.OnInflow(tank, r.tNs, r.inflow)
			}
		}
		switch {
		case r.hasLevel:
			accept(r.tank, r.tNs, r.level)
		case !known:
			problem(UnknownTank, fmt.Sprintf("tank %q is not configured", r.tank))
		case opt.OnInflow == nil:
			rep.Foreign++
		}
	}

	for {
		if lr.n&4095 == 0 {
			if err := ctx.Err(); err != nil {
				return rep, fmt.Errorf("ingest: %s:%d: %w", path, lr.n, err)
			}
		}
		line, noEOL, tooLong, err := lr.next()
		if errors.Is(err, io.EOF) {
			return rep, unreadable(path, &rep)
		}
		rep.Lines++
		if err != nil {
			if src.fileErr != nil {
				return rep, fmt.Errorf("ingest: %s:%d: %w", path, lr.n, src.fileErr)
			}
			// The compressed stream ended early or is corrupt: what came
			// before stands, the rest of the file is lost.
			problem(Truncated, fmt.Sprintf("compressed stream broken after %d bytes of this line: %v", len(line), err))
			return rep, nil
		}
		if tooLong {
			problem(Malformed, fmt.Sprintf("line longer than %d bytes", lr.max))
			continue
		}
		var kind ProblemKind
		var text string
		switch format {
		case FormatCSV:
			tank, tNs, v, skip, k, t, fatal := cp.parse(line, opt.Precision)
			switch {
			case fatal != nil:
				return rep, fmt.Errorf("ingest: %s:%d: %w", path, lr.n, fatal)
			case skip:
				rep.Ignored++
				continue
			case k == "":
				accept(tank, tNs, v)
				continue
			}
			kind, text = k, t
		default:
			r := lp.parse(line)
			switch {
			case r.skip:
				rep.Ignored++
				continue
			case r.foreign:
				rep.Foreign++
				continue
			}
			if r.kind == "" {
				lpAccept(r)
				continue
			}
			kind, text = r.kind, r.text
		}
		if noEOL {
			kind, text = Truncated, "last line has no newline and does not parse: "+text
		}
		problem(kind, text)
	}
}

// unreadable is the error of a file none of whose lines parsed (every line
// that is not a header, comment or blank one malformed or truncated): a
// wrong format, a binary file, an encoding the reader does not know. Its
// problems are in rep as well; nil for any other file.
func unreadable(path string, rep *Report) error {
	bad := rep.Counts[Malformed] + rep.Counts[Truncated]
	if bad == 0 || rep.Samples > 0 || rep.Foreign > 0 || bad != rep.Lines-rep.Ignored {
		return nil
	}
	first := ""
	for _, p := range rep.Examples {
		if p.Kind == Malformed || p.Kind == Truncated {
			first = fmt.Sprintf("; line %d: %s", p.Line, p.Text)
			break
		}
	}
	return fmt.Errorf("ingest: %s: no line of its %d could be read%s", path, rep.Lines, first)
}

// Conversion turns one tank's raw readings into head (and inflow into m^3/s).
type Conversion struct {
	Sensor      Sensor
	OutletElevM float64 // outlet elevation above the vessel bottom, m
	// InflowToSI converts the inflow meter's unit to m^3/s; 0 means the tank
	// has no inflow meter.
	InflowToSI float64
	// MinHeadM and MaxHeadM bound the heads the tank can show (its bottom
	// and top relative to the outlet, widened by a tolerance); a reading
	// outside is an out_of_range problem, not a sample. Both 0: no bound.
	MinHeadM, MaxHeadM float64
}

// Head converts a raw reading to head, m; ok is false (with what is wrong)
// for a reading outside [MinHeadM, MaxHeadM] or one that does not convert.
// File reads and InfluxDB pulls both convert through it.
func (c *Conversion) Head(v float64) (h float64, problem string) {
	h = c.Sensor.HeadM(v, c.OutletElevM)
	switch {
	case math.IsNaN(h) || math.IsInf(h, 0):
		return h, fmt.Sprintf("reading %g does not convert to a level", v)
	case (c.MinHeadM != 0 || c.MaxHeadM != 0) && (h < c.MinHeadM || h > c.MaxHeadM):
		return h, fmt.Sprintf("reading %g is a head of %.4g m, outside the tank's %.3g to %.3g m", v, h, c.MinHeadM, c.MaxHeadM)
	}
	return h, ""
}

// ReadSeries expands the glob patterns, reads every matching file once in
// lexical order of the paths (name files so that this is time order) and
// returns one Series of head per tank in conv. Each tank's times are strictly
// increasing across all files: a sample not after the previous one of its
// tank is skipped and counted, with its file and line. Samples of tanks not in
// conv (or, when opt.Tanks is set, not in both) are counted as unknown_tank.
//
// With opt.InflowField set, tanks whose Conversion has InflowToSI > 0 get
// InflowM3s by sample-and-hold of the meter's readings; samples before the
// meter's first reading get NaN. ReadSeries sets opt.OnInflow itself. Tanks
// without level readings get no Series.
//
// An error is returned for a pattern that matches no file, an invalid
// Conversion, or any error of ReadFile; the Report holds what was read so far.
// ReadSeries holds every sample read; StreamSeries does not.
func ReadSeries(ctx context.Context, patterns []string, format Format, opt ReadOptions, conv map[string]Conversion) (map[string]*model.Series, Report, error) {
	out := map[string]*model.Series{}
	rep, err := StreamSeries(ctx, patterns, format, opt, conv, 1<<16, func(c *model.Series) {
		s := out[c.Tank]
		if s == nil {
			s = &model.Series{Tank: c.Tank}
			out[c.Tank] = s
		}
		s.TimeNs = append(s.TimeNs, c.TimeNs...)
		s.HeadM = append(s.HeadM, c.HeadM...)
		if c.InflowM3s != nil {
			s.InflowM3s = append(s.InflowM3s, c.InflowM3s...)
		}
	})
	if err != nil && len(out) == 0 && rep.Files == 0 {
		return nil, rep, err
	}
	return out, rep, err
}

// StreamSeries reads like ReadSeries but hands each tank's samples to emit in
// chunks of at most chunk samples (in time order per tank; the chunks of
// different tanks interleave as the files do), so memory does not grow with
// the length of the files. A chunk and its slices are emit's to keep.
// Every tank's last chunk is emitted at the end, also when an error stops
// the read part-way.
func StreamSeries(ctx context.Context, patterns []string, format Format, opt ReadOptions, conv map[string]Conversion, chunk int, emit func(*model.Series)) (Report, error) {
	var rep Report
	for tank, c := range conv {
		if err := c.Sensor.Validate(); err != nil {
			return rep, fmt.Errorf("ingest: tank %q: %w", tank, err)
		}
		if math.IsNaN(c.OutletElevM) || math.IsInf(c.OutletElevM, 0) || c.InflowToSI < 0 {
			return rep, fmt.Errorf("ingest: tank %q: outlet elevation must be finite and inflow factor non-negative", tank)
		}
	}
	if chunk < 1 {
		chunk = 1
	}
	paths, err := expand(patterns)
	if err != nil {
		return rep, err
	}
	known := make(map[string]bool, len(conv))
	for tank := range conv {
		if opt.Tanks == nil || opt.Tanks[tank] {
			known[tank] = true
		}
	}
	opt.Tanks = known
	// Readings become heads before the order check, so that one out of
	// range is a problem of its own. The tank of the line before is kept
	// (names are interned: == is a pointer compare when they match).
	var rTank string
	var rConv Conversion
	opt.Convert = func(tank string, v float64) (float64, string) {
		if tank != rTank {
			rTank, rConv = tank, conv[tank]
		}
		return rConv.Head(v)
	}
	flows := map[string]*meterReadings{}
	if opt.InflowField != "" {
		opt.OnInflow = func(tank string, tNs int64, v float64) {
			f := flows[tank]
			if f == nil {
				f = &meterReadings{last: math.NaN()}
				flows[tank] = f
			}
			f.t = append(f.t, tNs)
			f.v = append(f.v, v*conv[tank].InflowToSI)
		}
	}
	bufs := map[string]*model.Series{}
	var order []string
	flush := func(s *model.Series) {
		if s.Len() == 0 {
			return
		}
		if opt.InflowField != "" && conv[s.Tank].InflowToSI > 0 {
			f := flows[s.Tank]
			if f == nil {
				f = &meterReadings{last: math.NaN()}
				flows[s.Tank] = f
			}
			s.InflowM3s = f.hold(s.TimeNs)
		}
		emit(s)
	}
	var sTank string
	var sBuf *model.Series
	sink := func(tank string, tNs int64, h float64) {
		s := sBuf
		if tank != sTank || s == nil {
			s = bufs[tank]
			if s == nil {
				s = &model.Series{Tank: tank}
				bufs[tank] = s
				order = append(order, tank)
			}
		}
		// Emit before appending, so that the inflow reading of the last
		// line in the chunk has been delivered.
		if s.Len() >= chunk {
			flush(s)
			s = &model.Series{Tank: tank, TimeNs: make([]int64, 0, chunk), HeadM: make([]float64, 0, chunk)}
			bufs[tank] = s
		}
		sTank, sBuf = tank, s
		s.Append(tNs, h) // converted by opt.Convert
	}
	ord := newOrder()
	for _, p := range paths {
		var r Report
		r, err = readFile(ctx, p, format, opt, ord, sink)
		rep.Merge(r)
		if err != nil {
			break
		}
	}
	for _, tank := range order {
		flush(bufs[tank])
	}
	return rep, err
}

// meterReadings are one tank's inflow readings in m^3/s not yet applied,
// and the last one applied.
type meterReadings struct {
	t    []int64
	v    []float64
	last float64 // NaN before the first reading
}

// hold samples the meter at times by sample-and-hold and drops the readings
// it has passed, keeping the last one for the next chunk.
func (f *meterReadings) hold(times []int64) []float64 {
	out := make([]float64, len(times))
	j := 0
	for i, t := range times {
		for j < len(f.t) && f.t[j] <= t {
			f.last = f.v[j]
			j++
		}
		out[i] = f.last
	}
	f.t, f.v = f.t[j:], f.v[j:]
	return out
}

// expand resolves glob patterns to a sorted, duplicate-free list of files.
func expand(patterns []string) ([]string, error) {
	seen := map[string]bool{}
	var paths []string
	for _, pat := range patterns {
		m, err := filepath.Glob(pat)
		if err != nil {
			return nil, fmt.Errorf("ingest: pattern %q: %w", pat, err)
		}
		if len(m) == 0 {
			return nil, fmt.Errorf("ingest: pattern %q matches no file", pat)
		}
		for _, p := range m {
			if !seen[p] {
				seen[p] = true
				paths = append(paths, p)
			}
		}
	}
	sort.Strings(paths)
	return paths, nil
}
