package ingest

import (
	"bufio"
	"bytes"
	"compress/gzip"
	"errors"
	"fmt"
	"io"
	"os"
	"strings"
)

// DefaultMaxLineBytes is the longest line kept when ReadOptions.MaxLineBytes is 0.
const DefaultMaxLineBytes = 1 << 20

// lineReader hands out one line at a time from a bufio.Reader without ever
// holding more than max bytes of a line. A longer line is skipped up to its
// newline and reported as too long.
type lineReader struct {
	br  *bufio.Reader
	max int
	n   int64  // number of the line last returned (1-based)
	buf []byte // a line longer than the bufio buffer is gathered here
}

func newLineReader(r io.Reader, max int) *lineReader {
	if max <= 0 {
		max = DefaultMaxLineBytes
	}
	return &lineReader{br: bufio.NewReaderSize(&crReader{r: r}, 64<<10), max: max}
}

// crReader turns a carriage return that is not followed by a line feed into
// a line feed, so that files with old Macintosh line ends ("\r" alone) are
// read line by line like "\n" and "\r\n" files instead of as one over-long
// line. A "\r" at the end of a read waits for the next byte.
type crReader struct {
	r       io.Reader
	pending bool // a "\r" held back from the previous read
	err     error
}

func (c *crReader) Read(p []byte) (int, error) {
	if len(p) == 0 {
		return 0, nil
	}
	off := 0
	if c.pending {
		p[0] = '\r'
		off = 1
	}
	if c.err != nil {
		c.pending = false
		if off == 1 {
			p[0] = '\n' // a final lone "\r"
			return 1, nil
		}
		return 0, c.err
	}
	n, err := c.r.Read(p[off:])
	n += off
	c.err = err
	c.pending = false
	for i := 0; i < n; {
		j := bytes.IndexByte(p[i:n], '\r')
		if j < 0 {
			break
		}
		i += j
		switch {
		case i+1 < n:
			if p[i+1] != '\n' {
				p[i] = '\n'
			}
		case err == nil:
			// the last byte: whether a "\n" follows is in the next read
			c.pending = true
			n--
		default:
			p[i] = '\n'
		}
		i++
	}
	if c.pending || n > 0 {
		return n, nil
	}
	return n, err
}

// next returns the next line without its "\n" or "\r\n". The slice is valid
// until the next call. noEOL is true when the line ended at the end of the
// input without a newline; tooLong when the line exceeded max bytes (the
// returned slice then holds only its first bytes). At the end of the input
// next returns io.EOF; any other error comes with the partial line read so far
// (which may be empty), counted as a line.
func (r *lineReader) next() (line []byte, noEOL, tooLong bool, err error) {
	r.buf = r.buf[:0]
	first := true
	var chunk []byte
	for {
		chunk, err = r.br.ReadSlice('\n')
		if first && err == nil {
			// Fast path: the whole line is in the bufio buffer.
			r.n++
			line = trimEOL(chunk)
			if len(line) > r.max {
				return line[:r.max], false, true, nil
			}
			return line, false, false, nil
		}
		first = false
		if !tooLong {
			if len(r.buf)+len(chunk) > r.max+2 {
				tooLong = true
				room := r.max - len(r.buf)
				if room > 0 {
					r.buf = append(r.buf, chunk[:min(room, len(chunk))]...)
				}
			} else {
				r.buf = append(r.buf, chunk...)
			}
		}
		switch {
		case err == nil:
			r.n++
			line = trimEOL(r.buf)
			if tooLong && len(line) > r.max {
				line = line[:r.max]
			}
			return line, false, tooLong || len(line) > r.max, nil
		case errors.Is(err, bufio.ErrBufferFull):
			continue
		case errors.Is(err, io.EOF) && len(r.buf) == 0 && !tooLong:
			return nil, false, false, io.EOF
		case errors.Is(err, io.EOF):
			r.n++
			line = trimEOL(r.buf)
			return line, true, tooLong || len(line) > r.max, nil
		default:
			r.n++
			return r.buf, true, tooLong, err
		}
	}
}

func trimEOL(b []byte) []byte {
	b = bytes.TrimSuffix(b, []byte("\n"))
	return bytes.TrimSuffix(b, []byte("\r"))
}

// fileSource is an opened input: the file, and a decompressor when the name
// ends in ".gz". Errors of the file itself are remembered so that a read
// error can be told apart from corrupt compressed data.
type fileSource struct {
	f       *os.File
	r       io.Reader
	fileErr error
}

func (s *fileSource) Read(p []byte) (int, error) { return s.r.Read(p) }

type errTrap struct{ s *fileSource }

func (t errTrap) Read(p []byte) (int, error) {
	n, err := t.s.f.Read(p)
	if err != nil && !errors.Is(err, io.EOF) {
		t.s.fileErr = err
	}
	return n, err
}

func openSource(path string) (*fileSource, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("ingest: %w", err)
	}
	s := &fileSource{f: f}
	s.r = errTrap{s}
	if strings.HasSuffix(path, ".gz") {
		zr, err := gzip.NewReader(bufio.NewReaderSize(s.r, 64<<10))
		if err != nil {
			f.Close()
			return nil, fmt.Errorf("ingest: %s: not a gzip stream: %w", path, err)
		}
		s.r = zr
	}
	return s, nil
}

func (s *fileSource) Close() error { return s.f.Close() }
