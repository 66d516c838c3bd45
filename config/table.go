package config

import (
	"bytes"
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"math"
	"strings"
)

// column describes one column of a two-column table file. Its header is
// name_<unit> with a unit from units (converted to SI), or, for a raw
// reading (units nil), name alone or name_<label> with the sensor's unit
// label (the values are kept as read).
type column struct {
	name  string
	units map[string]float64 // nil: a raw reading
	label string             // raw reading: the sensor's unit, which the header may name
}

// header is how the column is written, for messages: "level_<unit>" or
// "reading" / "reading_mA".
func (c column) header() string {
	if c.units == nil {
		if c.label == "" {
			return c.name
		}
		return c.name + " or " + c.name + "_" + c.label
	}
	return c.name + "_<unit>"
}

// factor parses one header cell; ok is false when it does not name this
// column with an accepted unit.
func (c column) factor(cell string) (float64, bool) {
	cell = strings.TrimSpace(cell)
	if c.units == nil {
		return 1, cell == c.name || c.label != "" && cell == c.name+"_"+c.label
	}
	u, ok := strings.CutPrefix(cell, c.name+"_")
	if !ok {
		return 0, false
	}
	f, ok := c.units[strings.TrimSpace(u)]
	return f, ok
}

// tableRow is one data row of a table file, in SI (a raw reading as read),
// with its 1-based line.
type tableRow struct {
	a, b float64
	line int
}

// readTable parses a two-column CSV table: a header naming both columns (see
// column), then one row of two plain numbers per line. Lines starting with
// '#' and blank lines are skipped, and a UTF-8 byte order mark is allowed.
// Every problem is a message "name:line: ..." (or "name: ..." when no line
// applies); rows with a problem are left out, the others are returned in
// file order.
func readTable(data []byte, name string, cols [2]column) ([]tableRow, []string) {
	data = bytes.TrimPrefix(data, []byte("\xef\xbb\xbf"))
	r := csv.NewReader(bytes.NewReader(data))
	r.FieldsPerRecord = 2
	r.TrimLeadingSpace = true
	r.Comment = '#'
	r.ReuseRecord = true
	accepted := func() string {
		var b strings.Builder
		fmt.Fprintf(&b, "header must be %s,%s", cols[0].header(), cols[1].header())
		for _, c := range cols {
			if c.units != nil {
				fmt.Fprintf(&b, "; %s units: %s", c.name, unitList(c.units))
			}
		}
		return b.String()
	}
	head, err := r.Read()
	var pe *csv.ParseError
	switch {
	case errors.Is(err, io.EOF):
		return nil, []string{fmt.Sprintf("%s: no header line (%s)", name, accepted())}
	case errors.As(err, &pe):
		return nil, []string{fmt.Sprintf("%s:%d: %v (%s)", name, pe.StartLine, pe.Err, accepted())}
	case err != nil:
		return nil, []string{fmt.Sprintf("%s: %v", name, err)}
	}
	hline, _ := r.FieldPos(0)
	fa, oka := cols[0].factor(head[0])
	fb, okb := cols[1].factor(head[1])
	if !oka || !okb {
		return nil, []string{fmt.Sprintf("%s:%d: header %q: %s", name, hline, strings.Join(head, ","), accepted())}
	}
	var rows []tableRow
	var probs []string
	for {
		rec, err := r.Read()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			if errors.As(err, &pe) {
				probs = append(probs, fmt.Sprintf("%s:%d: %v", name, pe.StartLine, pe.Err))
				continue
			}
			probs = append(probs, fmt.Sprintf("%s: %v", name, err))
			break
		}
		line, _ := r.FieldPos(0)
		a, err1 := parseNumber(rec[0])
		b, err2 := parseNumber(rec[1])
		a, b = a*fa, b*fb
		if err1 != nil || err2 != nil || math.IsInf(a, 0) || math.IsInf(b, 0) {
			probs = append(probs, fmt.Sprintf("%s:%d: want two plain numbers (%s, %s)", name, line, cols[0].name, cols[1].name))
			continue
		}
		rows = append(rows, tableRow{a, b, line})
	}
	return rows, probs
}
