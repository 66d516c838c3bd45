package ingest

import (
	"bytes"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
)

// Line protocol, as read here:
//
//	measurement[,tag=value...] field=value[,field=value...] timestamp
//
// Measurement names escape "," and " " with a backslash; tag keys, tag values
// and field keys escape ",", "=" and " "; "\\" is a literal backslash, and a
// backslash before any other character is kept as it is. Field values are
// floats (1.5, -2e3), integers (12i), unsigned integers (12u), booleans or
// double-quoted strings (escaping \" and \\). Lines starting with # are
// comments. The timestamp is required (a sample without a time is useless in a
// file) and is an integer in the configured precision, nanoseconds by default.

// lpParser holds the names to look for.
type lpParser struct {
	measurement string // "" accepts every measurement
	field       string
	inflowField string // "" reads no inflow
	tankTag     string
	prec        Precision
	scratch     []byte
}

type lpResult struct {
	skip, foreign bool
	tank          []byte
	tNs           int64
	level         float64
	hasLevel      bool
	inflow        float64
	hasInflow     bool
	kind          ProblemKind // the line is skipped
	text          string
	inflowKind    ProblemKind // the inflow field is bad; the level stands
	inflowText    string
}

func lpBad(kind ProblemKind, format string, a ...any) lpResult {
	return lpResult{kind: kind, text: fmt.Sprintf(format, a...)}
}

// stopSet marks the bytes that end a line protocol token.
type stopSet [256]bool

func newStopSet(chars string) *stopSet {
	var s stopSet
	for i := 0; i < len(chars); i++ {
		s[chars[i]] = true
	}
	return &s
}

var (
	stopMeas = newStopSet(", ")  // measurement, tag value
	stopKey  = newStopSet("=, ") // tag key, field key
)

// scanLP advances from i to the first unescaped byte of stops.
func scanLP(b []byte, i int, stops *stopSet) int {
	for i < len(b) {
		c := b[i]
		if c == '\\' {
			i += 2
			continue
		}
		if stops[c] {
			return i
		}
		i++
	}
	return len(b)
}

// unescapeLP removes the backslash before any byte of specials (and before a
// backslash). It returns b itself when there is nothing to remove.
func unescapeLP(dst, b []byte, specials string) []byte {
	if bytes.IndexByte(b, '\\') < 0 {
		return b
	}
	dst = dst[:0]
	for i := 0; i < len(b); i++ {
		if b[i] == '\\' && i+1 < len(b) && (b[i+1] == '\\' || strings.IndexByte(specials, b[i+1]) >= 0) {
			i++
		}
		dst = append(dst, b[i])
	}
	return dst
}

func (p *lpParser) parse(line []byte) lpResult {
	b := bytes.TrimLeft(line, " \t")
	if len(b) == 0 || b[0] == '#' {
		return lpResult{skip: true}
	}
	i := scanLP(b, 0, stopMeas)
	if i == 0 {
		return lpBad(Malformed, "empty measurement in %s", excerpt(line))
	}
	if p.measurement != "" && string(unescapeLP(p.scratch, b[:i], ", ")) != p.measurement {
		return lpResult{foreign: true}
	}
	var tank []byte
	for i < len(b) && b[i] == ',' {
		i++
		ks := i
		i = scanLP(b, i, stopKey)
		if i == ks || i >= len(b) || b[i] != '=' {
			return lpBad(Malformed, "bad tag in %s", excerpt(line))
		}
		key := b[ks:i]
		i++
		vs := i
		i = scanLP(b, i, stopMeas)
		if i == vs {
			return lpBad(Malformed, "empty tag value in %s", excerpt(line))
		}
		if string(unescapeLP(p.scratch, key, ",= ")) == p.tankTag {
			if tank != nil {
				// which one is meant cannot be known: neither is taken
				return lpBad(Malformed, "tag %q given twice in %s", p.tankTag, excerpt(line))
			}
			tank = unescapeLP(nil, b[vs:i], ",= ")
		}
	}
	if i >= len(b) || b[i] != ' ' {
		return lpBad(Malformed, "no field set in %s", excerpt(line))
	}
	for i < len(b) && b[i] == ' ' {
		i++
	}
	var r lpResult
	var levelRaw, inflowRaw []byte
	for {
		ks := i
		i = scanLP(b, i, stopKey)
		if i == ks || i >= len(b) || b[i] != '=' {
			return lpBad(Malformed, "bad field in %s", excerpt(line))
		}
		key := b[ks:i]
		i++
		vs := i
		if i < len(b) && b[i] == '"' {
			i++
			for i < len(b) && b[i] != '"' {
				if b[i] == '\\' {
					i++
				}
				i++
			}
			if i >= len(b) {
				return lpBad(Malformed, "unterminated string field in %s", excerpt(line))
			}
			i++
		} else {
			for i < len(b) && b[i] != ',' && b[i] != ' ' {
				i++
			}
		}
		k := unescapeLP(p.scratch, key, ",= ")
		switch {
		case string(k) == p.field:
			if r.hasLevel {
				return lpBad(Malformed, "field %q given twice in %s", p.field, excerpt(line))
			}
			levelRaw, r.hasLevel = b[vs:i], true
		case p.inflowField != "" && string(k) == p.inflowField:
			if r.hasInflow {
				return lpBad(Malformed, "field %q given twice in %s", p.inflowField, excerpt(line))
			}
			inflowRaw, r.hasInflow = b[vs:i], true
		}
		if i < len(b) && b[i] == ',' {
			i++
			continue
		}
		break
	}
	if !r.hasLevel && !r.hasInflow {
		return lpResult{foreign: true}
	}
	for i < len(b) && b[i] == ' ' {
		i++
	}
	ts := bytes.TrimRight(b[i:], " \t")
	if len(ts) == 0 {
		return lpBad(Malformed, "missing timestamp in %s", excerpt(line))
	}
	if tank == nil {
		return lpBad(Malformed, "no %q tag in %s", p.tankTag, excerpt(line))
	}
	t, err := strconv.ParseInt(string(ts), 10, 64)
	if err != nil {
		return lpBad(Malformed, "timestamp %s is not an integer", excerpt(ts))
	}
	mult, _ := p.prec.nsPer()
	if mult > 1 {
		if t > math.MaxInt64/mult || t < math.MinInt64/mult {
			return lpBad(Malformed, "timestamp %s out of range", excerpt(ts))
		}
		t *= mult
	}
	r.tank, r.tNs = tank, t
	if r.hasLevel {
		v, kind, text := lpNumber(levelRaw)
		if kind != "" {
			return lpBad(kind, "field %q: %s", p.field, text)
		}
		r.level = v
	}
	if r.hasInflow {
		v, kind, text := lpNumber(inflowRaw)
		if kind != "" {
			if r.hasLevel { // keep the level sample; the inflow reading alone is lost
				r.hasInflow = false
				r.inflowKind, r.inflowText = kind, fmt.Sprintf("field %q: %s", p.inflowField, text)
				return r
			}
			return lpBad(kind, "field %q: %s", p.inflowField, text)
		}
		r.inflow = v
	}
	return r
}

// lpNumber reads a numeric field value.
func lpNumber(v []byte) (float64, ProblemKind, string) {
	if len(v) == 0 {
		return 0, EmptyValue, "empty value"
	}
	switch v[0] {
	case '"':
		return 0, Malformed, "string value " + excerpt(v)
	case 't', 'T', 'f', 'F':
		switch string(v) {
		case "t", "T", "true", "True", "TRUE", "f", "F", "false", "False", "FALSE":
			return 0, Malformed, "boolean value " + excerpt(v)
		}
	}
	switch v[len(v)-1] {
	case 'i':
		n, err := strconv.ParseInt(string(v[:len(v)-1]), 10, 64)
		if err != nil {
			return 0, Malformed, "bad integer " + excerpt(v)
		}
		return float64(n), "", ""
	case 'u':
		n, err := strconv.ParseUint(string(v[:len(v)-1]), 10, 64)
		if err != nil {
			return 0, Malformed, "bad unsigned integer " + excerpt(v)
		}
		return float64(n), "", ""
	}
	return parseValue(v)
}

var (
	lpMeasEscaper = strings.NewReplacer(`\`, `\\`, `,`, `\,`, ` `, `\ `)
	lpKeyEscaper  = strings.NewReplacer(`\`, `\\`, `,`, `\,`, `=`, `\=`, ` `, `\ `)
)

// WriteLineProtocol writes one line per sample:
//
//	measurement,tankTag=tank field=value timestamp
//
// with nanosecond timestamps and floats in the shortest form that reads back
// exactly. Names are escaped as line protocol requires. Names must be
// non-empty and free of line breaks, the measurement must not start with #,
// and the values finite (line protocol has no NaN).
func WriteLineProtocol(w io.Writer, measurement, field, tankTag, tank string, timesNs []int64, values []float64) error {
	if len(timesNs) != len(values) {
		return fmt.Errorf("ingest: write line protocol: tank %q: %d times but %d values", tank, len(timesNs), len(values))
	}
	for _, n := range []string{measurement, field, tankTag, tank} {
		if n == "" || strings.ContainsAny(n, "\r\n") {
			return fmt.Errorf("ingest: write line protocol: tank %q: name %q must be non-empty and on one line", tank, n)
		}
	}
	if measurement[0] == '#' {
		return fmt.Errorf("ingest: write line protocol: measurement %q must not start with #", measurement)
	}
	prefix := lpMeasEscaper.Replace(measurement) + "," + lpKeyEscaper.Replace(tankTag) + "=" +
		lpKeyEscaper.Replace(tank) + " " + lpKeyEscaper.Replace(field) + "="
	buf := make([]byte, 0, 4096)
	for i, t := range timesNs {
		v := values[i]
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return fmt.Errorf("ingest: write line protocol: tank %q: sample %d is %v", tank, i, v)
		}
		buf = append(buf, prefix...)
		buf = strconv.AppendFloat(buf, v, 'g', -1, 64)
		buf = append(buf, ' ')
		buf = strconv.AppendInt(buf, t, 10)
		buf = append(buf, '\n')
		if len(buf) > 3500 || i == len(timesNs)-1 {
			if _, err := w.Write(buf); err != nil {
				return fmt.Errorf("ingest: write line protocol: tank %q: %w", tank, err)
			}
			buf = buf[:0]
		}
	}
	return nil
}
