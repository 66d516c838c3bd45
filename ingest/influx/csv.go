package influx

import (
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"math"
	"math/bits"
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
// Unlike the library, it converts only the cells it needs (time, value, tank,
// and the second value of a pivoted result) and records whose first cell is neither empty nor an annotation are
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
	qAt int   // index in buf of the first '"' at or after r (w if none); below r: to be found again
	eof bool  // src returned io.EOF
	err error // a read error other than io.EOF, returned once buf is drained

	dayKey [2]uint64 // bytes 0-7 and 3-10 ("YYYY-MM-DDT") of the last time parsed by hand; 0: none
	dayNs  int64     // its midnight in Unix ns
	line   int       // physical line number of the last record's first line (1-based)
	lines  int       // physical lines consumed so far
	cells  [][]byte  // cells of the current record (into buf or scratch)
	scr    []byte    // a quoted record as read
	out    []byte    // its unquoted cells
	bounds [][2]int  // cell bounds in out
	tagCol string    // name of the tank column
	valCol string    // name of the value column: "_value", or a field name after a pivot
	auxCol string    // name of the second value column of a pivoted result; "" for none

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
	iAux       int  // -1 when absent (or not asked for): the second value reads NaN
	usable     bool // the table has time, numeric value and tank columns
	noFast     bool // tests: general path only
	timeOK     bool // the time column is a dateTime
	tagOK      bool // the tank column is a string
	kind       valueKind
	auxKind    valueKind // valueOther: the second value reads NaN
	types      [][]byte  // per cell, #datatype (copies)
	defaults   [][]byte  // per cell, #default (copies)
}

func newCSVRows(src io.Reader, tagCol string) *csvRows {
	return newCSVPairRows(src, tagCol, "_value", "")
}

// newCSVPairRows reads the value from the column named valCol and, when
// auxCol is not "", a second value from the column named auxCol: the shape of
// a result pivoted on _field, whose value columns are named after the fields.
func newCSVPairRows(src io.Reader, tagCol, valCol, auxCol string) *csvRows {
	return &csvRows{src: src, buf: make([]byte, 256<<10), tagCol: tagCol, valCol: valCol, auxCol: auxCol,
		qAt: -1, iTime: -1, iValue: -1, iTag: -1, iAux: -1}
}

// fill reads more input after buf[w:], compacting or growing buf as needed.
// It returns false when no more input can come (EOF or error).
func (c *csvRows) fill() bool {
	if c.eof || c.err != nil {
		return false
	}
	c.qAt = -1
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
	if c.split(trimCR(line)) {
		return true
	}
	return c.quotedRecord(line)
}

const (
	lo7     = 0x7f7f7f7f7f7f7f7f
	commas8 = 0x2c2c2c2c2c2c2c2c // ','
	quotes8 = 0x2222222222222222 // '"'
)

// eqMask has the high bit of each byte of x that equals the byte of pat set,
// and no other bit (exact, no borrow between bytes).
func eqMask(x, pat uint64) uint64 {
	y := x ^ pat
	return ^(((y & lo7) + lo7) | y | lo7)
}

// split cuts a record without quotes at its commas into c.cells, eight bytes
// at a time. It returns false, leaving the record to quotedRecord, when the
// line holds a '"'.
func (c *csvRows) split(line []byte) bool {
	cells := c.cells[:0]
	start, i := 0, 0
	for ; i+8 <= len(line); i += 8 {
		x := binary.LittleEndian.Uint64(line[i:])
		if eqMask(x, quotes8) != 0 {
			c.cells = cells
			return false
		}
		for m := eqMask(x, commas8); m != 0; m &= m - 1 {
			j := i + bits.TrailingZeros64(m)>>3
			cells = append(cells, line[start:j])
			start = j + 1
		}
	}
	if rem := len(line) - i; rem > 0 && len(line) >= 8 {
		// The last partial word: load the eight bytes that end the line
		// and drop the ones already looked at.
		x := binary.LittleEndian.Uint64(line[len(line)-8:]) >> (8 * (8 - rem))
		keep := uint64(1)<<(8*rem) - 1 // the rem low bytes
		if eqMask(x, quotes8)&keep != 0 {
			c.cells = cells
			return false
		}
		for m := eqMask(x, commas8) & keep; m != 0; m &= m - 1 {
			j := i + bits.TrailingZeros64(m)>>3
			cells = append(cells, line[start:j])
			start = j + 1
		}
	} else {
		for ; i < len(line); i++ {
			switch line[i] {
			case ',':
				cells = append(cells, line[start:i])
				start = i + 1
			case '"':
				c.cells = cells
				return false
			}
		}
	}
	c.cells = append(cells, line[start:])
	return true
}

func trimCR(b []byte) []byte {
	if n := len(b); n > 0 && b[n-1] == '\r' {
		return b[:n-1]
	}
	return b
}

// quotedRecord parses a record holding quotes, reading further physical
// lines while a quoted cell is open. The raw record is gathered in c.scr and
// the unquoted cells written to c.out.
func (c *csvRows) quotedRecord(first []byte) bool {
	c.scr = append(c.scr[:0], first...)
	for {
		more, err := c.unquote(trimCR(c.scr))
		if err != nil {
			c.err = fmt.Errorf("line %d: %w", c.line, err)
			return false
		}
		if !more {
			return true
		}
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
}

// unquote splits rec per RFC 4180 into c.cells (backed by c.out). more
// reports a quoted cell still open at the end of rec: the record goes on on
// the next line.
func (c *csvRows) unquote(rec []byte) (more bool, err error) {
	c.cells = c.cells[:0]
	if cap(c.out) < len(rec) {
		c.out = make([]byte, 0, 2*len(rec))
	}
	out := c.out[:0]
	bounds := c.bounds[:0]
	in := 0
	for {
		start := len(out)
		if in < len(rec) && rec[in] == '"' {
			in++
			for {
				if in >= len(rec) {
					return true, nil
				}
				ch := rec[in]
				if ch == '"' {
					if in+1 < len(rec) && rec[in+1] == '"' {
						out = append(out, '"')
						in += 2
						continue
					}
					in++
					break
				}
				out = append(out, ch)
				in++
			}
			if in < len(rec) && rec[in] != ',' {
				return false, fmt.Errorf("extraneous %q after a quoted cell", rec[in])
			}
		} else {
			for in < len(rec) && rec[in] != ',' {
				if rec[in] == '"' {
					return false, errors.New("bare \" in an unquoted cell")
				}
				out = append(out, rec[in])
				in++
			}
		}
		bounds = append(bounds, [2]int{start, len(out)})
		if in >= len(rec) {
			break
		}
		in++ // the comma
	}
	c.out, c.bounds = out, bounds
	for _, b := range bounds {
		c.cells = append(c.cells, out[b[0]:b[1]:b[1]])
	}
	return false, nil
}

// readErr is the error that ended the input, nil at a clean end.
func (c *csvRows) readErr() error { return c.err }

// next returns the next data row that has a time, a numeric value and a
// tank (rows missing one of them, or with a non-numeric value, are skipped).
// tank points into the reader's buffers and is valid until the next call.
// At the end of the input it returns ok false and a nil error; an in-band
// query error, malformed CSV or a failed read are returned as errors.
func (c *csvRows) next() (tank []byte, tNs int64, v float64, ok bool, err error) {
	tank, tNs, v, _, ok, err = c.nextPair()
	return tank, tNs, v, ok, err
}

// nextPair is next that also returns the second value of the row (the
// auxCol cell): NaN when the reader has no second column, the table lacks
// it, its type is not numeric or the cell is empty. Whether a row is
// returned depends on the first value alone.
func (c *csvRows) nextPair() (tank []byte, tNs int64, v, aux float64, ok bool, err error) {
	for {
		if c.usable && !c.noFast {
			tank, ts, vs, as, fast := c.fastRow()
			if fast {
				if len(tank) == 0 || len(ts) == 0 || len(vs) == 0 {
					continue
				}
				tNs, v, aux, err = c.convert(ts, vs, as)
				if err != nil {
					return nil, 0, 0, 0, false, err
				}
				return tank, tNs, v, aux, true, nil
			}
		}
		if !c.record() {
			return nil, 0, 0, 0, false, c.readErr()
		}
		cells := c.cells
		if len(cells) <= 1 {
			continue
		}
		first := cells[0]
		if len(first) > 0 && first[0] == '#' {
			if err := c.annotation(cells); err != nil {
				return nil, 0, 0, 0, false, err
			}
			continue
		}
		if len(first) > 0 {
			c.annot = false
			continue // neither data nor annotation: ignored
		}
		if !c.inTable {
			return nil, 0, 0, 0, false, fmt.Errorf("line %d: data before any annotation", c.line)
		}
		if len(cells) != c.ncol {
			return nil, 0, 0, 0, false, fmt.Errorf("line %d: %d cells, the table has %d", c.line, len(cells), c.ncol)
		}
		if !c.haveHeader {
			if err := c.header(cells); err != nil {
				return nil, 0, 0, 0, false, err
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
			return nil, 0, 0, 0, false, &inBandError{msg: msg}
		}
		if !c.usable {
			continue
		}
		tank = c.cell(c.iTag)
		ts := c.cell(c.iTime)
		vs := c.cell(c.iValue)
		if len(tank) == 0 || len(ts) == 0 || len(vs) == 0 {
			continue
		}
		var as []byte
		if c.iAux >= 0 {
			as = c.cell(c.iAux)
		}
		tNs, v, aux, err = c.convert(ts, vs, as)
		if err != nil {
			return nil, 0, 0, 0, false, err
		}
		return tank, tNs, v, aux, true, nil
	}
}

// convert parses the time and value cells of a data row, and the second
// value cell as (NaN when empty or not numeric).
func (c *csvRows) convert(ts, vs, as []byte) (tNs int64, v, aux float64, err error) {
	tNs, err = c.timeNs(ts)
	if err != nil {
		return 0, 0, 0, fmt.Errorf("line %d: _time %q: %w", c.line, ts, err)
	}
	v, err = parseValue(c.kind, vs)
	if err != nil {
		return 0, 0, 0, fmt.Errorf("line %d: %s: %w", c.line, c.valCol, err)
	}
	aux = math.NaN()
	if len(as) > 0 && c.auxKind != valueOther {
		aux, err = parseValue(c.auxKind, as)
		if err != nil {
			return 0, 0, 0, fmt.Errorf("line %d: %s: %w", c.line, c.auxCol, err)
		}
	}
	return tNs, v, aux, nil
}

// parseValue converts a numeric cell of the given kind.
func parseValue(kind valueKind, b []byte) (v float64, err error) {
	s := unsafe.String(unsafe.SliceData(b), len(b)) // strconv keeps no reference (its errors clone the input)
	switch kind {
	case valueDouble:
		var fast bool
		if v, fast = fastFloat(b); !fast {
			v, err = strconv.ParseFloat(s, 64)
		}
	case valueLong:
		var x int64
		x, err = strconv.ParseInt(s, 10, 64)
		v = float64(x)
	case valueULong:
		var x uint64
		x, err = strconv.ParseUint(s, 10, 64)
		v = float64(x)
	}
	return v, err
}

// maxFastCells bounds the cells of a record that fastRow handles.
const maxFastCells = 16

const newlines8 = 0x0a0a0a0a0a0a0a0a // '\n'

// fastRow handles the common record of a usable table in one pass over the
// buffer: a complete line, without quotes, with the table's number of cells
// and an empty first cell. It finds the line end and the commas eight bytes
// at a time (a line holds no quote when it ends before c.qAt) and returns the tank, time and value cells (defaults applied).
// For anything else it consumes nothing and returns fast false, leaving the
// record to the general path.
func (c *csvRows) fastRow() (tank, ts, vs, as []byte, fast bool) {
	if c.ncol > maxFastCells {
		return nil, nil, nil, nil, false
	}
	b := c.buf[c.r:c.w]
	if c.qAt < c.r {
		// Quotes are rare: find the next one once, then lines before it
		// need no quote test.
		c.qAt = c.w
		if i := bytes.IndexByte(b, '"'); i >= 0 {
			c.qAt = c.r + i
		}
	}
	var pos [maxFastCells]int // comma positions
	n, end := 0, -1
	for i := 0; i+8 <= len(b); i += 8 {
		x := binary.LittleEndian.Uint64(b[i:])
		cm := eqMask(x, commas8)
		if nm := eqMask(x, newlines8); nm != 0 {
			cm &= (nm & -nm) - 1 // the bytes before the first newline
			end = i + bits.TrailingZeros64(nm)>>3
		}
		for ; cm != 0; cm &= cm - 1 {
			if n == len(pos) {
				return nil, nil, nil, nil, false
			}
			pos[n] = i + bits.TrailingZeros64(cm)>>3
			n++
		}
		if end >= 0 {
			break
		}
	}
	if end < 0 || c.r+end > c.qAt || n+1 != c.ncol || pos[0] != 0 {
		return nil, nil, nil, nil, false
	}
	lineEnd := end
	if lineEnd > 0 && b[lineEnd-1] == '\r' {
		lineEnd--
	}
	if pos[n-1] >= lineEnd { // the CR was in the last cell's place: let the general path judge
		return nil, nil, nil, nil, false
	}
	c.r += end + 1
	c.lines++
	c.line = c.lines
	pos[n] = lineEnd
	get := func(k int) []byte {
		if cell := b[pos[k-1]+1 : pos[k]]; len(cell) > 0 {
			return cell
		}
		return c.defaults[k]
	}
	if c.iAux >= 0 {
		as = get(c.iAux)
	}
	return get(c.iTag), get(c.iTime), get(c.iValue), as, true
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
		c.haveHeader, c.haveType, c.errTable, c.usable = false, false, false, false
		c.ncol = len(cells)
		c.iTime, c.iValue, c.iTag, c.iAux = -1, -1, -1, -1
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
		c.errTable, c.usable = true, false
		return nil
	}
	// Later columns of the same name win: the data columns follow the
	// result and table columns. Source keeps the names asked for distinct.
	for i := 1; i < len(cells); i++ {
		switch string(cells[i]) {
		case "_time":
			c.iTime = i
		case c.valCol:
			c.iValue = i
		case c.tagCol:
			c.iTag = i
		case c.auxCol:
			if c.auxCol != "" {
				c.iAux = i
			}
		}
	}
	c.timeOK = c.iTime >= 0 && bytes.HasPrefix(c.types[c.iTime], []byte("dateTime"))
	c.tagOK = c.iTag >= 0 && string(c.types[c.iTag]) == "string"
	c.kind, c.auxKind = valueOther, valueOther
	if c.iValue >= 0 {
		c.kind = kindOf(c.types[c.iValue])
	}
	if c.iAux >= 0 {
		c.auxKind = kindOf(c.types[c.iAux])
	}
	c.usable = c.timeOK && c.tagOK && c.kind != valueOther
	return nil
}

// kindOf maps a #datatype to the value kinds read as numbers.
func kindOf(datatype []byte) valueKind {
	switch string(datatype) {
	case "double":
		return valueDouble
	case "long":
		return valueLong
	case "unsignedLong":
		return valueULong
	}
	return valueOther
}

// inBandError is an error table in the result stream: the query failed on
// the server after the response had started.
type inBandError struct{ msg string }

func (e *inBandError) Error() string { return "query error in the result: " + e.msg }

// timeNs is parseTimeNs with the date part of the previous time reused:
// consecutive samples nearly always share it.
func (c *csvRows) timeNs(b []byte) (int64, error) {
	if len(b) >= 20 && binary.LittleEndian.Uint64(b) == c.dayKey[0] && binary.LittleEndian.Uint64(b[3:]) == c.dayKey[1] && c.dayKey[0] != 0 {
		if ns, ok := clockNs(b); ok {
			return c.dayNs + ns, nil
		}
	}
	ns, err := parseTimeNs(b)
	if err == nil && len(b) >= 20 {
		if clk, ok := clockNs(b); ok {
			if _, ok := fastTimeNs(b); ok {
				c.dayKey = [2]uint64{binary.LittleEndian.Uint64(b), binary.LittleEndian.Uint64(b[3:])}
				c.dayNs = ns - clk
			}
		}
	}
	return ns, err
}

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
	if len(b) < 20 || b[4] != '-' || b[7] != '-' || b[10] != 'T' {
		return 0, false
	}
	yh, yl, mo, dd := digits2(b, 0), digits2(b, 2), digits2(b, 5), digits2(b, 8)
	if yh < 0 || yl < 0 || mo < 1 || mo > 12 || dd < 1 {
		return 0, false
	}
	y := yh*100 + yl
	if y < 1678 || y > 2261 { // keep clear of int64 nanosecond overflow
		return 0, false
	}
	if dd > daysIn(mo, y) {
		return 0, false
	}
	clk, ok := clockNs(b)
	if !ok {
		return 0, false
	}
	return daysFromCivil(y, mo, dd)*86400e9 + clk, true
}

func digits2(b []byte, i int) int {
	x, y := b[i]-'0', b[i+1]-'0'
	if x > 9 || y > 9 {
		return -1
	}
	return int(x)*10 + int(y)
}

// clockNs parses the "HH:MM:SS[.f{1,9}]Z" that follows the date of a time
// of at least 20 bytes, to nanoseconds since midnight.
func clockNs(b []byte) (int64, bool) {
	if b[13] != ':' || b[16] != ':' || b[len(b)-1] != 'Z' {
		return 0, false
	}
	hh, mi, ss := digits2(b, 11), digits2(b, 14), digits2(b, 17)
	if hh < 0 || hh > 23 || mi < 0 || mi > 59 || ss < 0 || ss > 59 {
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
	return (int64(hh)*3600+int64(mi)*60+int64(ss))*1e9 + frac, true
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

// pow10 are the powers of ten that float64 holds exactly.
var pow10 = [...]float64{1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10,
	1e11, 1e12, 1e13, 1e14, 1e15, 1e16, 1e17, 1e18, 1e19, 1e20, 1e21, 1e22}

// fastFloat parses [-]d+[.d+] when its digits, read as an integer m, are at
// most 2^53 and at most 22 of them follow the point: m and the divisor 10^k
// are then both exact float64 values, so m / 10^k is the correctly rounded
// quotient, the value strconv.ParseFloat returns (the classic exact fast path
// of decimal conversion). Any other form returns ok false.
func fastFloat(b []byte) (float64, bool) {
	i, neg := 0, false
	if len(b) > 0 && b[0] == '-' {
		neg, i = true, 1
	}
	var m uint64
	start := i
	for ; i < len(b); i++ {
		d := b[i] - '0'
		if d > 9 {
			break
		}
		m = m*10 + uint64(d)
	}
	nd := i - start
	if nd == 0 {
		return 0, false
	}
	k := 0
	if i < len(b) {
		if b[i] != '.' {
			return 0, false
		}
		i++
		fs := i
		for ; i < len(b); i++ {
			d := b[i] - '0'
			if d > 9 {
				return 0, false
			}
			m = m*10 + uint64(d)
		}
		k = i - fs
		nd += k
		if k == 0 {
			return 0, false
		}
	}
	if nd > 19 || m > 1<<53 || k > 22 {
		return 0, false
	}
	f := float64(m) / pow10[k]
	if neg {
		f = -f
	}
	return f, true
}
