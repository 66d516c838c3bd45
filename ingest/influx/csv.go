package influx

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"strconv"
	"time"
	"unsafe"
)

// This file holds the streaming reader of the annotated CSV that
// POST /api/v2/query returns. It replaces the client library's
// QueryTableResult on the hot path: that one builds a map[string]any per row
// and converts every cell, which made parsing 35-70 times slower than the
// download itself.
//
// The format (one block per table schema; a block may hold many tables):
//
//	#datatype,string,long,dateTime:RFC3339,double,string
//	#group,false,false,false,false,true
//	#default,_result,,,,
//	,result,table,_time,_value,tank
//	,,0,2024-03-01T00:00:00Z,1.5,T1
//	<empty line>
//
// Lines are CRLF or LF terminated; cells follow RFC 4180 quoting (a quoted
// cell may hold commas, doubled quotes and line breaks). An error during the
// query arrives in-band as a block whose header starts with the column
// "error" (#datatype string,string), whose first row holds the message and a
// reference.
//
// The reader keeps the semantics of the library where they are sane: records
// with at most one cell (blank lines) are skipped; a '#' record outside an
// annotation block starts a new table; the first record with an empty first
// cell after the annotations is the header (a #datatype annotation is then
// required); a data record must have as many cells as the header; an empty
// cell takes the column's #default; data before any annotation is an error.
// Unlike the library, it converts only the three cells it needs (time, value,
// tank) and records whose first cell is neither empty nor an annotation are
// ignored rather than repeating the previous record.

// valueKind is the #datatype of the _value column.
type valueKind uint8

const (
	valueOther valueKind = iota // string, boolean, ... : the row is skipped
	valueDouble
	valueLong
	valueULong
)

// maxLineBytes bounds one logical CSV record (a quoted cell may span lines);
// longer ones are an error rather than unbounded memory.
const maxLineBytes = 16 << 20

// csvRows reads data rows of annotated CSV. It is not safe for concurrent
// use. The zero value is not usable: see newCSVRows.
type csvRows struct {
	src io.Reader
	buf []byte // input buffer; buf[r:w] is unread
	r   int
	w   int
	eof bool  // src returned io.EOF
	err error // a read error other than io.EOF, returned once buf is drained

	line   int      // physical line number of the last record's first line (1-based)
	lines  int      // physical lines consumed so far
	cells  [][]byte // cells of the current record (into buf or scratch)
	scr    []byte   // scratch for quoted records
	tagCol string   // name of the tank column

	// Current table.
	inTable    bool // an annotation block or a table is open
	annot      bool // the previous record was an annotation
	haveHeader bool
	haveType   bool
	errTable   bool
	ncol       int // cells per record, the first (annotation) cell included
	iTime      int // -1 when absent
	iValue     int
	iTag       int
	timeOK     bool // the time column is a dateTime
	tagOK      bool // the tank column is a string
	kind       valueKind
	types      [][]byte // per cell, #datatype (copies)
	defaults   [][]byte // per cell, #default (copies)
}

func newCSVRows(src io.Reader, tagCol string) *csvRows {
	return &csvRows{src: src, buf: make([]byte, 256<<10), tagCol: tagCol, iTime: -1, iValue: -1, iTag: -1}
}

// fill reads more input after buf[w:], compacting or growing buf as needed.
// It returns false when no more input can come (EOF or error).
func (c *csvRows) fill() bool {
	if c.eof || c.err != nil {
		return false
	}
	if c.r > 0 {
		n := copy(c.buf, c.buf[c.r:c.w])
		c.r, c.w = 0, n
	}
	if c.w == len(c.buf) {
		if len(c.buf) >= maxLineBytes {
			c.err = fmt.Errorf("a record longer than %d bytes", maxLineBytes)
			return false
		}
		nb := make([]byte, 2*len(c.buf))
		copy(nb, c.buf[:c.w])
		c.buf = nb
	}
	for range 100 {
		n, err := c.src.Read(c.buf[c.w:])
		c.w += n
		if err == io.EOF {
			c.eof = true
			return n > 0
		}
		if err != nil {
			c.err = err
			return n > 0
		}
		if n > 0 {
			return true
		}
	}
	c.err = io.ErrNoProgress
	return false
}

// physLine returns the next physical line without its LF (a CR before the
// LF is kept), or ok false at the end of the input. At the end, a last line
// without LF is returned only on a clean EOF: after a read error it may be
// cut short, so it is dropped and the error reported by readErr.
func (c *csvRows) physLine() (line []byte, ok bool) {
	for {
		if i := bytes.IndexByte(c.buf[c.r:c.w], '\n'); i >= 0 {
			line = c.buf[c.r : c.r+i]
			c.r += i + 1
			c.lines++
			return line, true
		}
		if !c.fill() {
			if c.err == nil && c.r < c.w {
				line = c.buf[c.r:c.w]
				c.r = c.w
				c.lines++
				return line, true
			}
			return nil, false
		}
	}
}

// record reads the next logical record into c.cells. It returns false at the
// end of the input or on an error (see c.err).
func (c *csvRows) record() bool {
	line, ok := c.physLine()
	if !ok {
		return false
	}
	c.line = c.lines
	if bytes.IndexByte(line, '"') < 0 {
		line = trimCR(line)
		c.cells = c.cells[:0]
		for {
			i := bytes.IndexByte(line, ',')
			if i < 0 {
				c.cells = append(c.cells, line)
				return true
			}
			c.cells = append(c.cells, line[:i])
			line = line[i+1:]
		}
	}
	return c.quotedRecord(line)
}

func trimCR(b []byte) []byte {
	if n := len(b); n > 0 && b[n-1] == '\r' {
		return b[:n-1]
	}
	return b
}

// quotedRecord parses a record holding quotes, reading further physical
// lines while a quoted cell is open. Cells are copied into c.scr.
func (c *csvRows) quotedRecord(first []byte) bool {
	c.scr = append(c.scr[:0], first...)
	for bytes.Count(c.scr, []byte{'"'})%2 == 1 {
		next, ok := c.physLine()
		if !ok {
			if c.err == nil {
				c.err = fmt.Errorf("line %d: quoted cell not closed at the end of the input", c.line)
			}
			return false
		}
		if len(c.scr)+len(next) > maxLineBytes {
			c.err = fmt.Errorf("line %d: a record longer than %d bytes", c.line, maxLineBytes)
			return false
		}
		// A line break inside quotes is LF (CRLF becomes LF, as encoding/csv does).
		c.scr = append(trimCR(c.scr), '\n')
		c.scr = append(c.scr, next...)
	}
	rec := trimCR(c.scr)
	// Unquote in place: the output never runs ahead of the input.
	c.cells = c.cells[:0]
	out, in := 0, 0
	for {
		start := out
		if in < len(rec) && rec[in] == '"' {
			in++
			for {
				if in >= len(rec) {
					c.err = fmt.Errorf("line %d: quoted cell not closed", c.line)
					return false
				}
				ch := rec[in]
				if ch == '"' {
					if in+1 < len(rec) && rec[in+1] == '"' {
						rec[out] = '"'
						out++
						in += 2
						continue
					}
					in++
					break
				}
				rec[out] = ch
				out++
				in++
			}
			if in < len(rec) && rec[in] != ',' {
				c.err = fmt.Errorf("line %d: extraneous %q after a quoted cell", c.line, rec[in])
				return false
			}
		} else {
			for in < len(rec) && rec[in] != ',' {
				if rec[in] == '"' {
					c.err = fmt.Errorf("line %d: bare \" in an unquoted cell", c.line)
					return false
				}
				rec[out] = rec[in]
				out++
				in++
			}
		}
		c.cells = append(c.cells, rec[start:out])
		if in >= len(rec) {
			return true
		}
		in++ // the comma
		// The output slot of the comma is skipped so cells stay disjoint.
		out++
	}
}

// readErr is the error that ended the input, nil at a clean end.
func (c *csvRows) readErr() error { return c.err }

// next returns the next data row that has a time, a numeric value and a
// tank (rows missing one of them, or with a non-numeric value, are skipped).
// tank points into the reader's buffers and is valid until the next call.
// At the end of the input it returns ok false and a nil error; an in-band
// query error, malformed CSV or a failed read are returned as errors.
func (c *csvRows) next() (tank []byte, tNs int64, v float64, ok bool, err error) {
	for c.record() {
		cells := c.cells
		if len(cells) <= 1 {
			continue
		}
		first := cells[0]
		if len(first) > 0 && first[0] == '#' {
			if err := c.annotation(cells); err != nil {
				return nil, 0, 0, false, err
			}
			continue
		}
		if len(first) > 0 {
			c.annot = false
			continue // neither data nor annotation: ignored
		}
		if !c.inTable {
			return nil, 0, 0, false, fmt.Errorf("line %d: data before any annotation", c.line)
		}
		if len(cells) != c.ncol {
			return nil, 0, 0, false, fmt.Errorf("line %d: %d cells, the table has %d", c.line, len(cells), c.ncol)
		}
		if !c.haveHeader {
			if err := c.header(cells); err != nil {
				return nil, 0, 0, false, err
			}
			continue
		}
		if c.errTable {
			msg := "unknown query error"
			if len(cells[1]) > 0 {
				msg = string(cells[1])
			}
			if len(cells) > 2 && len(cells[2]) > 0 {
				msg += "," + string(cells[2])
			}
			return nil, 0, 0, false, &inBandError{msg: msg}
		}
		if c.iTime < 0 || c.iValue < 0 || c.iTag < 0 || !c.timeOK || !c.tagOK || c.kind == valueOther {
			continue
		}
		tank = c.cell(c.iTag)
		ts := c.cell(c.iTime)
		vs := c.cell(c.iValue)
		if len(tank) == 0 || len(ts) == 0 || len(vs) == 0 {
			continue
		}
		tNs, err = parseTimeNs(ts)
		if err != nil {
			return nil, 0, 0, false, fmt.Errorf("line %d: _time %q: %w", c.line, ts, err)
		}
		s := unsafe.String(unsafe.SliceData(vs), len(vs)) // strconv keeps no reference (its errors clone the input)
		switch c.kind {
		case valueDouble:
			v, err = strconv.ParseFloat(s, 64)
		case valueLong:
			var x int64
			x, err = strconv.ParseInt(s, 10, 64)
			v = float64(x)
		case valueULong:
			var x uint64
			x, err = strconv.ParseUint(s, 10, 64)
			v = float64(x)
		}
		if err != nil {
			return nil, 0, 0, false, fmt.Errorf("line %d: _value: %w", c.line, err)
		}
		return tank, tNs, v, true, nil
	}
	return nil, 0, 0, false, c.readErr()
}

// cell returns cell i of the current record, or the column's default when
// the cell is empty.
func (c *csvRows) cell(i int) []byte {
	if b := c.cells[i]; len(b) > 0 {
		return b
	}
	return c.defaults[i]
}

// annotation handles a '#' record.
func (c *csvRows) annotation(cells [][]byte) error {
	if !c.annot {
		// A new table: forget the previous one.
		c.inTable, c.annot = true, true
		c.haveHeader, c.haveType, c.errTable = false, false, false
		c.ncol = len(cells)
		c.iTime, c.iValue, c.iTag = -1, -1, -1
		c.types = resize(c.types, c.ncol)
		c.defaults = resize(c.defaults, c.ncol)
	}
	if len(cells) != c.ncol {
		return fmt.Errorf("line %d: %d cells, the table has %d", c.line, len(cells), c.ncol)
	}
	switch string(cells[0]) {
	case "#datatype":
		c.haveType = true
		for i, b := range cells {
			c.types[i] = append(c.types[i][:0], b...)
		}
	case "#default":
		for i, b := range cells {
			c.defaults[i] = append(c.defaults[i][:0], b...)
		}
	}
	return nil
}

func resize(s [][]byte, n int) [][]byte {
	if cap(s) < n {
		s = append(s[:cap(s)], make([][]byte, n-cap(s))...)
	}
	s = s[:n]
	for i := range s {
		s[i] = s[i][:0]
	}
	return s
}

// header handles the column-name record after the annotations.
func (c *csvRows) header(cells [][]byte) error {
	c.annot = false
	if !c.haveType {
		return fmt.Errorf("line %d: table without a #datatype annotation", c.line)
	}
	c.haveHeader = true
	if string(cells[1]) == "error" {
		c.errTable = true
		return nil
	}
	for i := 1; i < len(cells); i++ {
		switch string(cells[i]) {
		case "_time":
			c.iTime = i
		case "_value":
			c.iValue = i
		case c.tagCol:
			c.iTag = i
		}
	}
	c.timeOK = c.iTime >= 0 && bytes.HasPrefix(c.types[c.iTime], []byte("dateTime"))
	c.tagOK = c.iTag >= 0 && string(c.types[c.iTag]) == "string"
	c.kind = valueOther
	if c.iValue >= 0 {
		switch string(c.types[c.iValue]) {
		case "double":
			c.kind = valueDouble
		case "long":
			c.kind = valueLong
		case "unsignedLong":
			c.kind = valueULong
		}
	}
	return nil
}

// inBandError is an error table in the result stream: the query failed on
// the server after the response had started.
type inBandError struct{ msg string }

func (e *inBandError) Error() string { return "query error in the result: " + e.msg }

var errTimeSyntax = errors.New("not an RFC 3339 time")

// parseTimeNs parses an RFC 3339 time to Unix nanoseconds. The form Flux
// writes, "2006-01-02T15:04:05[.fffffffff]Z", is parsed by hand; anything
// else (offsets, years outside 1678..2261) goes through time.Parse.
func parseTimeNs(b []byte) (int64, error) {
	if ns, ok := fastTimeNs(b); ok {
		return ns, nil
	}
	t, err := time.Parse(time.RFC3339Nano, string(b))
	if err != nil {
		return 0, errTimeSyntax
	}
	return t.UnixNano(), nil
}

// fastTimeNs parses "YYYY-MM-DDTHH:MM:SS[.f{1,9}]Z" with the same checks as
// time.Parse (day within the month, hour < 24, minute and second < 60). It
// returns ok false for any other form, leaving it to time.Parse.
func fastTimeNs(b []byte) (int64, bool) {
	if len(b) < 20 || b[4] != '-' || b[7] != '-' || b[10] != 'T' || b[13] != ':' || b[16] != ':' || b[len(b)-1] != 'Z' {
		return 0, false
	}
	d2 := func(i int) int {
		x, y := b[i]-'0', b[i+1]-'0'
		if x > 9 || y > 9 {
			return -1
		}
		return int(x)*10 + int(y)
	}
	yh, yl := d2(0), d2(2)
	mo, dd, hh, mi, ss := d2(5), d2(8), d2(11), d2(14), d2(17)
	if yh < 0 || yl < 0 || mo < 1 || mo > 12 || dd < 1 || hh < 0 || hh > 23 || mi < 0 || mi > 59 || ss < 0 || ss > 59 {
		return 0, false
	}
	y := yh*100 + yl
	if y < 1678 || y > 2261 { // keep clear of int64 nanosecond overflow
		return 0, false
	}
	if dd > daysIn(mo, y) {
		return 0, false
	}
	var frac int64
	switch n := len(b) - 21; {
	case n == -1: // no fraction
	case n >= 1 && n <= 9 && b[19] == '.':
		for _, ch := range b[20 : len(b)-1] {
			d := ch - '0'
			if d > 9 {
				return 0, false
			}
			frac = frac*10 + int64(d)
		}
		for range 9 - n {
			frac *= 10
		}
	default:
		return 0, false
	}
	days := daysFromCivil(y, mo, dd)
	secs := days*86400 + int64(hh)*3600 + int64(mi)*60 + int64(ss)
	return secs*1e9 + frac, true
}

func daysIn(m, y int) int {
	switch m {
	case 2:
		if y%4 == 0 && (y%100 != 0 || y%400 == 0) {
			return 29
		}
		return 28
	case 4, 6, 9, 11:
		return 30
	}
	return 31
}

// daysFromCivil counts days from 1970-01-01 to the proleptic Gregorian date
// y-m-d (H. Hinnant's days_from_civil algorithm).
func daysFromCivil(y, m, d int) int64 {
	if m <= 2 {
		y--
	}
	era := y / 400 // y >= 1677 here, so no negative division
	yoe := y - era*400
	mp := (m + 9) % 12
	doy := (153*mp+2)/5 + d - 1
	doe := yoe*365 + yoe/4 - yoe/100 + doy
	return int64(era)*146097 + int64(doe) - 719468
}
