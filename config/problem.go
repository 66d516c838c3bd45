package config

import (
	"fmt"
	"sort"
	"strings"
)

// Problem is one thing wrong in a configuration file.
type Problem struct {
	Path string // where in the document, e.g. tanks[2].outlet.diameter
	Line int    // 1-based line in the file; 0 when unknown
	Msg  string
}

// ValidationError lists every problem found in one file, sorted by line.
type ValidationError struct {
	File     string
	Problems []Problem
}

// Error formats one problem per line as file:line: path: message, after a
// summary line.
func (e *ValidationError) Error() string {
	var b strings.Builder
	n := len(e.Problems)
	if n == 1 {
		b.WriteString("config: 1 problem\n")
	} else {
		fmt.Fprintf(&b, "config: %d problems\n", n)
	}
	for i, p := range e.Problems {
		if i > 0 {
			b.WriteByte('\n')
		}
		b.WriteString(e.format(p))
	}
	return b.String()
}

func (e *ValidationError) format(p Problem) string {
	return fmt.Sprintf("%s:%d: %s: %s", e.File, p.Line, p.Path, p.Msg)
}

// sortProblems orders by line, path and message, and drops exact repeats (a problem
// in the defaults block is found once per tank).
func sortProblems(ps []Problem) []Problem {
	sort.SliceStable(ps, func(i, j int) bool {
		if ps[i].Line != ps[j].Line {
			return ps[i].Line < ps[j].Line
		}
		if ps[i].Path != ps[j].Path {
			return ps[i].Path < ps[j].Path
		}
		return ps[i].Msg < ps[j].Msg
	})
	out := ps[:0]
	for i, p := range ps {
		if i > 0 && p == ps[i-1] {
			continue
		}
		out = append(out, p)
	}
	return out
}
