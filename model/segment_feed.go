package model

import "math"

// Thresholds of feedDip: a drain is taken for a fall with a feed running
// part of the way when its pieces' K spread by more than feedSpreadRel
// about the trend in head, and by more than feedSpreadZ standard errors.
const (
	feedPieces    = 8
	feedMinPiece  = 8 // samples per piece at least
	feedSpreadRel = 0.15
	feedSpreadZ   = 6.0
)

// feedDip reports whether the kept part [a, b] of a fall shows a feed
// that ran for part of it. A pump that starts or stops while the outlet is
// open slows the fall over part of it only, by q/√h against the outlet's
// K√h: the mass-balance K of the pieces it covers drops by that share
// (30 % and more for a feed of 30 % of the outlet flow), and the pieces
// before and after it do not. The drain is cut into up to feedPieces
// pieces of equal time; each piece's K is ΔV/∫√Δ dt (massK) with the
// relative error √2 σ/Δh of its level drop Δh; ln K of the pieces is
// fitted by weighted least squares against ln of their mid head, so that
// an outlet whose K follows the head smoothly (an exponent off 1/2, a
// coefficient that follows the Reynolds number) leaves no residual; and
// the fall is rejected when the largest and smallest residuals lie more
// than feedSpreadRel apart and more than feedSpreadZ standard errors. The
// mass balance over the two halves (kRatio) catches a feed over the
// whole fall; this one a feed over part of it. A metered inflow is in the
// balance already.
func (s *Segmenter) feedDip(a, b int, datum float64) bool {
	n := b - a + 1
	m := min(feedPieces, n/feedMinPiece)
	if m < 4 {
		return false
	}
	t0, t1 := s.tAt(a), s.tAt(b)
	var x, y, w, rel [feedPieces]float64
	i := a
	sigma := math.Max(s.sigma, noiseFloorM)
	for p := range m {
		end := t0 + (t1-t0)*int64(p+1)/int64(m)
		j := i + 1
		for j < b && s.tAt(j) < end {
			j++
		}
		if p == m-1 {
			j = b
		}
		dh := s.yAt(i) - s.yAt(j)
		k := s.massK(i, j, datum)
		hm := 0.5*(s.yAt(i)+s.yAt(j)) - datum
		if !(dh > 0) || !(k > 0) || !(hm > 0) {
			return false
		}
		rel[p] = math.Sqrt2 * sigma / dh
		x[p], y[p], w[p] = math.Log(hm), math.Log(k), 1/(rel[p]*rel[p])
		i = j
	}
	var sw, swx, swy float64
	for p := range m {
		sw += w[p]
		swx += w[p] * x[p]
		swy += w[p] * y[p]
	}
	xb, yb := swx/sw, swy/sw
	var sxx, sxy float64
	for p := range m {
		sxx += w[p] * (x[p] - xb) * (x[p] - xb)
		sxy += w[p] * (x[p] - xb) * (y[p] - yb)
	}
	slope := 0.0
	if sxx > 0 {
		slope = sxy / sxx
	}
	lo, hi := 0, 0
	var r [feedPieces]float64
	for p := range m {
		r[p] = y[p] - yb - slope*(x[p]-xb)
		if r[p] < r[lo] {
			lo = p
		}
		if r[p] > r[hi] {
			hi = p
		}
	}
	spread := r[hi] - r[lo]
	return spread > feedSpreadRel && spread > feedSpreadZ*math.Hypot(rel[hi], rel[lo])
}
