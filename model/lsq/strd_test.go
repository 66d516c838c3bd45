package lsq

import (
	"bufio"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
)

// strdSet is one NIST StRD file: certified values and data.
type strdSet struct {
	params     []strdParam
	residualSS float64 // NaN when absent
	residualSD float64
	r2         float64 // NaN when absent (nonlinear files)
	y          []float64
	x          [][]float64 // x[i] holds the predictors of observation i
}

type strdParam struct {
	name     string
	start    [2]float64 // NaN for linear sets
	cert, sd float64
}

// parseStRD reads a NIST StRD .dat file (CRLF or LF line ends, trailing
// blank lines and spaces allowed). Certified parameter lines look like
// "b1 = start1 start2 value sd" (nonlinear) or "B0 value sd" (linear); the
// data block follows the last line beginning with "Data:".
func parseStRD(r io.Reader) (*strdSet, error) {
	set := &strdSet{residualSS: math.NaN(), residualSD: math.NaN(), r2: math.NaN()}
	sc := bufio.NewScanner(r)
	sc.Buffer(make([]byte, 0, 4096), 1<<20)
	var lines []string
	for sc.Scan() {
		lines = append(lines, strings.TrimRight(sc.Text(), "\r \t"))
	}
	if err := sc.Err(); err != nil {
		return nil, fmt.Errorf("lsq: strd: %w", err)
	}
	dataAt := -1
	for i, l := range lines {
		if strings.HasPrefix(l, "Data:") {
			dataAt = i
		}
	}
	if dataAt < 0 {
		return nil, fmt.Errorf("lsq: strd: no line beginning with \"Data:\"")
	}
	cols := len(strings.Fields(lines[dataAt])) - 1
	if cols < 2 {
		return nil, fmt.Errorf("lsq: strd: line %d: data header names %d columns, need at least 2", dataAt+1, cols)
	}
	prevResidual := false
	for i, l := range lines[:dataAt] {
		f := strings.Fields(l)
		if len(f) == 0 {
			continue
		}
		wasResidual := prevResidual
		prevResidual = len(f) == 1 && f[0] == "Residual"
		num := func(k int) (float64, error) {
			v, err := strconv.ParseFloat(f[k], 64)
			if err != nil {
				return 0, fmt.Errorf("lsq: strd: line %d: field %d: %w", i+1, k+1, err)
			}
			return v, nil
		}
		switch {
		case isParamName(f[0], 'b') && len(f) == 6 && f[1] == "=":
			p := strdParam{name: f[0]}
			vals := make([]float64, 4)
			for k := range vals {
				v, err := num(k + 2)
				if err != nil {
					return nil, err
				}
				vals[k] = v
			}
			p.start = [2]float64{vals[0], vals[1]}
			p.cert, p.sd = vals[2], vals[3]
			set.params = append(set.params, p)
		case isParamName(f[0], 'B') && len(f) == 3:
			p := strdParam{name: f[0], start: [2]float64{math.NaN(), math.NaN()}}
			var err error
			if p.cert, err = num(1); err != nil {
				return nil, err
			}
			if p.sd, err = num(2); err != nil {
				return nil, err
			}
			set.params = append(set.params, p)
		case strings.HasPrefix(l, "Residual Sum of Squares:") && len(f) == 5:
			v, err := num(4)
			if err != nil {
				return nil, err
			}
			set.residualSS = v
		case strings.HasPrefix(l, "Residual Standard Deviation:") && len(f) == 4:
			v, err := num(3)
			if err != nil {
				return nil, err
			}
			set.residualSD = v
		case wasResidual && len(f) == 3 && f[0] == "Standard" && f[1] == "Deviation":
			v, err := num(2)
			if err != nil {
				return nil, err
			}
			set.residualSD = v
		case f[0] == "R-Squared" && len(f) == 2:
			v, err := num(1)
			if err != nil {
				return nil, err
			}
			set.r2 = v
		case f[0] == "Residual" && len(f) == 4:
			// ANOVA row of a linear set: df, SS, MS.
			v, err := num(2)
			if err != nil {
				return nil, err
			}
			set.residualSS = v
		}
	}
	if len(set.params) == 0 {
		return nil, fmt.Errorf("lsq: strd: no certified parameter lines")
	}
	for i, l := range lines[dataAt+1:] {
		f := strings.Fields(l)
		if len(f) == 0 {
			continue
		}
		if len(f) != cols {
			return nil, fmt.Errorf("lsq: strd: line %d: %d fields, want %d", dataAt+i+2, len(f), cols)
		}
		row := make([]float64, cols)
		for k := range f {
			v, err := strconv.ParseFloat(f[k], 64)
			if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
				return nil, fmt.Errorf("lsq: strd: line %d: field %d: %q is not a finite number", dataAt+i+2, k+1, f[k])
			}
			row[k] = v
		}
		set.y = append(set.y, row[0])
		set.x = append(set.x, row[1:])
	}
	if len(set.y) == 0 {
		return nil, fmt.Errorf("lsq: strd: no data rows after line %d", dataAt+1)
	}
	return set, nil
}

func isParamName(s string, letter byte) bool {
	if len(s) < 2 || s[0] != letter {
		return false
	}
	for _, c := range s[1:] {
		if c < '0' || c > '9' {
			return false
		}
	}
	return true
}
