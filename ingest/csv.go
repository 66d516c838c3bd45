package ingest

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
	"time"
)

// csvLayout is where the needed columns sit, from the header.
type csvLayout struct {
	time, tank, value, n int
}

// parseCSVHeader reads a header naming at least the columns time, tank and
// value (any order, case-insensitive; other columns are ignored).
func parseCSVHeader(line []byte) (csvLayout, error) {
	line = bytes.TrimPrefix(line, []byte("\xef\xbb\xbf")) // UTF-8 byte order mark
	l := csvLayout{time: -1, tank: -1, value: -1}
	var fields [][]byte
	fields, ok := splitCSV(line, fields)
	if !ok {
		return l, errors.New("header is not valid CSV")
	}
	l.n = len(fields)
	for i, f := range fields {
		var p *int
		switch strings.ToLower(string(bytes.TrimSpace(f))) {
		case "time":
			p = &l.time
		case "tank":
			p = &l.tank
		case "value":
			p = &l.value
		default:
			continue
		}
		if *p >= 0 {
			return l, fmt.Errorf("header names column %q twice", f)
		}
		*p = i
	}
	if l.time < 0 || l.tank < 0 || l.value < 0 {
		return l, fmt.Errorf("header %s must name the columns time, tank and value", excerpt(line))
	}
	return l, nil
}

// splitCSV splits one CSV record into dst (reused). Quoted fields follow
// RFC 4180 ("" is a quote) but may not span lines. ok is false for a stray
// quote.
func splitCSV(line []byte, dst [][]byte) ([][]byte, bool) {
	dst = dst[:0]
	if bytes.IndexByte(line, '"') < 0 {
		for {
			i := bytes.IndexByte(line, ',')
			if i < 0 {
				return append(dst, line), true
			}
			dst = append(dst, line[:i])
			line = line[i+1:]
		}
	}
	for {
		f := bytes.TrimLeft(line, " \t")
		if len(f) > 0 && f[0] == '"' {
			var val []byte
			i := 1
			for {
				j := bytes.IndexByte(f[i:], '"')
				if j < 0 {
					return dst, false
				}
				val = append(val, f[i:i+j]...)
				i += j + 1
				if i < len(f) && f[i] == '"' {
					val = append(val, '"')
					i++
					continue
				}
				break
			}
			rest := bytes.TrimLeft(f[i:], " \t")
			if val == nil {
				val = []byte{}
			}
			dst = append(dst, val)
			if len(rest) == 0 {
				return dst, true
			}
			if rest[0] != ',' {
				return dst, false
			}
			line = rest[1:]
			continue
		}
		i := bytes.IndexByte(line, ',')
		if i < 0 {
			if bytes.IndexByte(line, '"') >= 0 {
				return dst, false
			}
			return append(dst, line), true
		}
		if bytes.IndexByte(line[:i], '"') >= 0 {
			return dst, false
		}
		dst = append(dst, line[:i])
		line = line[i+1:]
	}
}

// parseValue reads a reading. It returns the problem kind and text when the
// value cannot be used.
func parseValue(b []byte) (float64, ProblemKind, string) {
	if len(b) == 0 {
		return 0, EmptyValue, "empty value"
	}
	v, err := strconv.ParseFloat(string(b), 64)
	if err != nil {
		if errors.Is(err, strconv.ErrRange) {
			return 0, Malformed, fmt.Sprintf("value %s out of range", excerpt(b))
		}
		return 0, Malformed, fmt.Sprintf("value %s is not a number", excerpt(b))
	}
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return 0, NaN, fmt.Sprintf("value %s is not finite", excerpt(b))
	}
	return v, "", ""
}

// csvParser holds the per-file state of the CSV reader.
type csvParser struct {
	layout csvLayout
	header bool
	fields [][]byte
}

// parse handles one line: it returns the sample or a problem; skip is true
// for a header, comment or blank line.
func (p *csvParser) parse(line []byte, prec Precision) (tank []byte, tNs int64, v float64, skip bool, kind ProblemKind, text string, fatal error) {
	trimmed := bytes.TrimSpace(line)
	if len(trimmed) == 0 || trimmed[0] == '#' {
		return nil, 0, 0, true, "", "", nil
	}
	if !p.header {
		l, err := parseCSVHeader(trimmed)
		if err != nil {
			return nil, 0, 0, false, "", "", err
		}
		p.layout, p.header = l, true
		return nil, 0, 0, true, "", "", nil
	}
	var ok bool
	p.fields, ok = splitCSV(line, p.fields)
	if !ok {
		return nil, 0, 0, false, Malformed, "stray quote in " + excerpt(line), nil
	}
	if len(p.fields) != p.layout.n {
		return nil, 0, 0, false, Malformed, fmt.Sprintf("%d fields, header has %d", len(p.fields), p.layout.n), nil
	}
	tank = bytes.TrimSpace(p.fields[p.layout.tank])
	if len(tank) == 0 {
		return nil, 0, 0, false, Malformed, "empty tank", nil
	}
	tNs, err := parseTime(bytes.TrimSpace(p.fields[p.layout.time]), prec)
	if err != nil {
		return nil, 0, 0, false, Malformed, err.Error(), nil
	}
	v, kind, text = parseValue(bytes.TrimSpace(p.fields[p.layout.value]))
	if kind != "" {
		return nil, 0, 0, false, kind, text, nil
	}
	return tank, tNs, v, false, "", "", nil
}

// CSVHeader is the header line written by WriteCSV.
const CSVHeader = "time,tank,value\n"

// WriteCSV writes a complete CSV file for one tank: the header, then one row
// per sample with the time in RFC 3339 (UTC, nanoseconds as needed) and the
// value in the shortest form that reads back exactly. NaN and infinities are
// written as NaN, +Inf and -Inf (the reader counts them as nan).
func WriteCSV(w io.Writer, tank string, timesNs []int64, values []float64) error {
	if _, err := io.WriteString(w, CSVHeader); err != nil {
		return fmt.Errorf("ingest: write csv: %w", err)
	}
	return WriteCSVRows(w, tank, timesNs, values)
}

// WriteCSVRows writes the rows of WriteCSV without a header, to append a
// further tank to a file.
func WriteCSVRows(w io.Writer, tank string, timesNs []int64, values []float64) error {
	if len(timesNs) != len(values) {
		return fmt.Errorf("ingest: write csv: tank %q: %d times but %d values", tank, len(timesNs), len(values))
	}
	if tank == "" || strings.ContainsAny(tank, "\r\n") || strings.TrimSpace(tank) != tank {
		return fmt.Errorf("ingest: write csv: tank name %q must be non-empty, on one line, without surrounding space", tank)
	}
	name := tank
	if strings.ContainsAny(tank, ",\"") {
		name = `"` + strings.ReplaceAll(tank, `"`, `""`) + `"`
	}
	buf := make([]byte, 0, 4096)
	for i, t := range timesNs {
		buf = time.Unix(0, t).UTC().AppendFormat(buf, time.RFC3339Nano)
		buf = append(buf, ',')
		buf = append(buf, name...)
		buf = append(buf, ',')
		buf = strconv.AppendFloat(buf, values[i], 'g', -1, 64)
		buf = append(buf, '\n')
		if len(buf) > 3500 || i == len(timesNs)-1 {
			if _, err := w.Write(buf); err != nil {
				return fmt.Errorf("ingest: write csv: tank %q: %w", tank, err)
			}
			buf = buf[:0]
		}
	}
	return nil
}
