package detect

import (
	"math"
	"slices"
)

// CUSUMARLTwoSidedMarkov returns the ARL of the two-sided CUSUM computed on
// the joint state (C+, C-) rather than by the combination rule, which is not
// exact once a head start lets both sides be positive together. Each side is
// discretised as in Brook & Evans (1972) with m states, the pair chain has m^2
// states, and the run-length distribution is propagated forward until its
// tail is geometric (the remainder is then summed in closed form). The result
// is extrapolated from m and 2m states (Richardson on the cell width, error
// O(1/m^2)), which gives three to four significant digits for m = 40. headHi and headLo are the start
// values of the upper and lower sides (h/2 for the fast initial response of
// Lucas & Crosier 1982). It panics if m < 2.
func CUSUMARLTwoSidedMarkov(k, h, delta, headHi, headLo float64, m int) float64 {
	a1, w1 := cusumPairChainARL(k, h, delta, headHi, headLo, m)
	a2, w2 := cusumPairChainARL(k, h, delta, headHi, headLo, 2*m)
	return (a2*w1*w1 - a1*w2*w2) / (w1*w1 - w2*w2)
}

type pairMove struct {
	to int32
	p  float64
}

type cellWeight struct {
	cell   int
	weight float64
}

// splitStart spreads a start value s over the two nearest cell centres.
func splitStart(s, w float64, m int) []cellWeight {
	x := s / w
	i := int(math.Floor(x))
	if i >= m-1 {
		return []cellWeight{{m - 1, 1}}
	}
	f := x - float64(i)
	return []cellWeight{{i, 1 - f}, {i + 1, f}}
}

func cusumPairChainARL(k, h, delta, headHi, headLo float64, m int) (arl, w float64) {
	if m < 2 {
		panic("detect: CUSUMARLTwoSidedMarkov needs m >= 2 states")
	}
	// Cell i is centred at i w, w = 2h/(2m-1); cell 0 holds the atom at zero
	// and everything below w/2, cell m-1 ends at h. A head start between two
	// centres is split between them with linear weights.
	w = 2 * h / float64(2*m-1)
	cell := func(v float64) int { // -1 when beyond h (signal)
		if v > h {
			return -1
		}
		if v < w/2 {
			return 0
		}
		return min(int(math.Round(v/w)), m-1)
	}
	moves := make([][]pairMove, m*m)
	bp := make([]float64, 0, 2*m+2)
	for i := 0; i < m; i++ {
		a := float64(i) * w
		for j := 0; j < m; j++ {
			b := float64(j) * w
			bp = bp[:0]
			for e := 0; e < m; e++ {
				edge := (float64(e) + 0.5) * w
				bp = append(bp, edge-a+k, b-k-edge)
			}
			slices.Sort(bp)
			var mv []pairMove
			for q := 0; q+1 < len(bp); q++ {
				zl, zh := bp[q], bp[q+1]
				if zh <= zl {
					continue
				}
				z := 0.5 * (zl + zh)
				ci := cell(math.Max(0, a+z-k))
				cj := cell(math.Max(0, b-z-k))
				if ci < 0 || cj < 0 {
					continue
				}
				p := stdNormCDF(zh-delta) - stdNormCDF(zl-delta)
				to := int32(ci*m + cj)
				if n := len(mv); n > 0 && mv[n-1].to == to {
					mv[n-1].p += p
				} else {
					mv = append(mv, pairMove{to, p})
				}
			}
			moves[i*m+j] = mv
		}
	}
	dist := make([]float64, m*m)
	next := make([]float64, m*m)
	for _, a := range splitStart(headHi, w, m) {
		for _, b := range splitStart(headLo, w, m) {
			dist[a.cell*m+b.cell] += a.weight * b.weight
		}
	}
	arl = 1.0
	prevSurv, prevRatio := 1.0, 0.0
	_ = cell
	for step := 1; step < 1_000_000; step++ {
		clear(next)
		for s, d := range dist {
			if d == 0 {
				continue
			}
			for _, mv := range moves[s] {
				next[mv.to] += d * mv.p
			}
		}
		dist, next = next, dist
		surv := 0.0
		for _, d := range dist {
			surv += d
		}
		arl += surv
		ratio := surv / prevSurv
		if step > 20 && math.Abs(ratio-prevRatio) < 1e-12 && ratio < 1 {
			return arl + surv*ratio/(1-ratio), w
		}
		if surv < 1e-15 {
			return arl, w
		}
		prevSurv, prevRatio = surv, ratio
	}
	return arl, w
}
