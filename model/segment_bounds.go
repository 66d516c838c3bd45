package model

import "math"

// Drain boundaries from the physics.
//
// During a free drain the head transform F of the tank (see HeadTransform)
// falls linearly in time, F(h(t)) = F(h0) - K (t - t0), for every shape; a
// hold before it (valve shut) and a hold after it (valve closed) are flat
// in F, or slowly falling when the shell leaks. In F the history around
// each boundary is therefore two straight lines that meet at the boundary,
// and the boundary is the join point of a continuous two-phase linear
// regression (Hudson, D. J. 1966, "Fitting segmented curves whose join
// points have to be estimated", JASA 61: 1097-1129): for every split of
// the window into a left and a right run, fit a line to each; when the two
// lines meet between the last left and the first right sample that is the
// constrained optimum, otherwise the join is put at the nearer of the two
// samples and the three-parameter continuous fit is solved there; the
// split with the least weighted residual sum of squares wins. All sums come
// from running totals, so a window of n samples costs O(n).
//
// The noise of the reading is σ in head, so in F it is σ/g with
// g = dh/dF = sqrt(h)/A(h): each sample is weighted by g². A drain that
// runs dry ends where its line reaches F(0) = 0 (the empty plateau has no
// weight in F: g → 0 there for shapes with a finite bottom area), so that
// end is the zero of the line fitted to the last part of the fall.
//
// Heads are taken above a datum: the empty plateau's reading when the
// drain ran dry, otherwise zero, the configured outlet elevation. When the
// outlet elevation is unknown (Tank.DatumKnown false) zero is only a
// provisional datum; an error δ in it bends the line in F by about
// δ/(2h) relative, which moves a join point by a small fraction of a
// sample because each window covers at most a third of the fall.

const (
	boundPreMax    = 64  // most hold samples in a start or end window
	boundFallShare = 0.3 // share of the fall's F drop in each window
	boundMinSide   = 3   // fewest samples on either side of a join
	boundMinHold   = 2   // fewest hold samples before a start (held flat)
	boundFreeHold  = 8   // from this many hold samples on, the hold's slope is fitted (a leak)
)

// boundSums are running weighted sums of t, t², F, tF and F² (t in s from
// the window's first sample, F from the window's first value).
type boundSums struct {
	w, t, tt, f, tf, ff []float64 // prefix sums, index 0 is the empty sum
}

func (b *boundSums) reset(n int) {
	grow := func(x []float64) []float64 {
		if cap(x) < n+1 {
			return make([]float64, n+1)
		}
		return x[:n+1]
	}
	b.w, b.t, b.tt, b.f, b.tf, b.ff = grow(b.w), grow(b.t), grow(b.tt), grow(b.f), grow(b.tf), grow(b.ff)
}

func (b *boundSums) set(i int, w, t, f float64) {
	b.w[i+1] = b.w[i] + w
	b.t[i+1] = b.t[i] + w*t
	b.tt[i+1] = b.tt[i] + w*t*t
	b.f[i+1] = b.f[i] + w*f
	b.tf[i+1] = b.tf[i] + w*t*f
	b.ff[i+1] = b.ff[i] + w*f*f
}

// run holds the sums of one run of samples [i, j).
type run struct{ w, t, tt, f, tf, ff float64 }

func (b *boundSums) run(i, j int) run {
	return run{b.w[j] - b.w[i], b.t[j] - b.t[i], b.tt[j] - b.tt[i], b.f[j] - b.f[i], b.tf[j] - b.tf[i], b.ff[j] - b.ff[i]}
}

// line fits F = a + c t to the run; sse is the weighted residual sum.
func (r run) line() (a, c, sse float64) {
	if !(r.w > 0) {
		return math.NaN(), math.NaN(), math.Inf(1)
	}
	mt, mf := r.t/r.w, r.f/r.w
	stt := r.tt - r.w*mt*mt
	stf := r.tf - r.w*mt*mf
	sff := r.ff - r.w*mf*mf
	if !(stt > 0) {
		return mf, 0, max(sff, 0)
	}
	c = stf / stt
	return mf - c*mt, c, max(sff-stf*stf/stt, 0)
}

// joined is the weighted residual sum of the continuous fit
// F = c + sL (t-τ) on the left run, c + sR (t-τ) on the right one; with
// flatL the left slope is held at zero.
func joined(l, r run, tau float64, flatL bool) float64 {
	uL, uuL, ufL := l.t-tau*l.w, l.tt-2*tau*l.t+tau*tau*l.w, l.tf-tau*l.f
	uR, uuR, ufR := r.t-tau*r.w, r.tt-2*tau*r.t+tau*tau*r.w, r.tf-tau*r.f
	if !(uuR > 0) || !flatL && !(uuL > 0) {
		return math.Inf(1)
	}
	sw, sf := l.w+r.w, l.f+r.f
	den, num := sw-uR*uR/uuR, sf-uR*ufR/uuR
	if !flatL {
		den -= uL * uL / uuL
		num -= uL * ufL / uuL
	}
	if !(den > 0) {
		return math.Inf(1)
	}
	c := num / den
	sR := (ufR - c*uR) / uuR
	fit := c*sf + sR*ufR
	if !flatL {
		fit += (ufL - c*uL) / uuL * ufL
	}
	return max(l.ff+r.ff-fit, 0)
}

// flat fits a constant F = a to the run.
func (r run) flat() (a, c, sse float64) {
	if !(r.w > 0) {
		return math.NaN(), 0, math.Inf(1)
	}
	a = r.f / r.w
	return a, 0, max(r.ff-r.w*a*a, 0)
}

// fg returns F at head h above the datum and g = dh/dF there, with h
// floored at hMin for g (the weight) only.
func (s *Segmenter) fg(h, hMin float64) (f, g float64) {
	if s.xf == nil {
		// unit-area vertical tank: F = 2 sqrt(h), g = sqrt(h)
		f = 2 * math.Sqrt(max(h, 0))
		return f, math.Sqrt(max(h, hMin))
	}
	f, _ = s.xf.fg(h)
	_, g = s.xf.fg(max(h, hMin))
	return f, g
}

// joinPoint fits the continuous two-phase line to the raw readings of
// [lo, hi] (spikes left out) in F above datum and returns the join time
// (ns) and whether a join was found with at least boundMinSide samples on
// each side. wantDrop > 0 asks for the right line to fall faster than the
// left (a drain's start), < 0 the opposite (its end).
func (s *Segmenter) joinPoint(lo, hi int, datum float64, wantDrop int) (int64, bool) {
	idx := s.boundIdx[:0]
	for j := lo; j <= hi; j++ {
		if !s.spikeAt(j) {
			idx = append(idx, j)
		}
	}
	s.boundIdx = idx
	n := len(idx)
	if n < boundMinHold+boundMinSide {
		return 0, false
	}
	t0 := s.tAt(idx[0])
	hMin := max(3*s.sigma, 1e-3)
	b := &s.bsums
	b.reset(n)
	var f0 float64
	for x, j := range idx {
		f, g := s.fg(s.hr[j-s.base]-datum, hMin)
		if x == 0 {
			f0 = f
		}
		b.set(x, g*g, float64(s.tAt(j)-t0)*1e-9, f-f0)
	}
	best, bestTau := math.Inf(1), math.NaN()
	minLeft := boundMinSide
	if wantDrop > 0 {
		minLeft = boundMinHold
	}
	for m := minLeft; m <= n-boundMinSide; m++ {
		// left run idx[:m], right run idx[m:]; the join lies in [tl, tr]
		l, r := b.run(0, m), b.run(m, n)
		tl := float64(s.tAt(idx[m-1])-t0) * 1e-9
		tr := float64(s.tAt(idx[m])-t0) * 1e-9
		// a hold of a few samples before a start is taken as flat
		flatL := wantDrop > 0 && m < boundFreeHold
		var al, cl, el float64
		if flatL {
			al, cl, el = l.flat()
		} else {
			al, cl, el = l.line()
		}
		ar, cr, er := r.line()
		if wantDrop > 0 && !(cr < cl) || wantDrop < 0 && !(cl < cr) {
			continue
		}
		tau := (ar - al) / (cl - cr)
		sse := el + er
		if !(tau >= tl && tau <= tr) {
			tau = clamp(tau, tl, tr)
			if math.IsNaN(tau) {
				tau = tl
			}
			sse = joined(l, r, tau, flatL)
		}
		if sse < best {
			best, bestTau = sse, tau
		}
	}
	if math.IsNaN(bestTau) {
		return 0, false
	}
	return t0 + int64(math.Round(bestTau*1e9)), true
}

// fIndex returns the first index in [from, to] (stepping by dir) whose
// median level above datum has F at or below target (dir > 0) or at or
// above it (dir < 0); to when none.
func (s *Segmenter) fIndex(from, to, dir int, datum, target float64) int {
	for j := from; j != to; j += dir {
		f, _ := s.fg(s.yAt(j)-datum, 0)
		if dir > 0 && f <= target || dir < 0 && f >= target {
			return j
		}
	}
	return to
}

// lastAtOrBefore is the last index in [lo, hi] with time <= tNs (lo when
// none).
func (s *Segmenter) lastAtOrBefore(lo, hi int, tNs int64) int {
	j := lo
	for j < hi && s.tAt(j+1) <= tNs {
		j++
	}
	return j
}

// placeStart returns the start of the fall [k, e]: the last sample at or
// before the join of the hold (from sample pre on, at most boundPreMax
// samples before k) and the first boundFallShare of the fall in F. It
// keeps k when no join can be fitted.
func (s *Segmenter) placeStart(pre, k, e int, datum float64) int {
	lo := max(pre, k-boundPreMax, s.base)
	fk, _ := s.fg(s.yAt(k)-datum, 0)
	fe, _ := s.fg(s.yAt(e)-datum, 0)
	hi := s.fIndex(k, e, 1, datum, fk-boundFallShare*(fk-fe))
	hi = max(hi, min(k+2*boundMinSide, e))
	tau, ok := s.joinPoint(lo, hi, datum, 1)
	if !ok {
		return k
	}
	return s.lastAtOrBefore(lo, hi, tau)
}

// placeClose returns the end of a fall [k, e] that stopped above the
// outlet (valve closed), with the hold (e, d] after it: the last sample at
// or before the join of the last boundFallShare of the fall and at most
// boundPreMax samples of the hold. It keeps e when no join can be fitted.
func (s *Segmenter) placeClose(k, e, d int, datum float64) int {
	hi := min(d, e+boundPreMax)
	fk, _ := s.fg(s.yAt(k)-datum, 0)
	fe, _ := s.fg(s.yAt(e)-datum, 0)
	lo := s.fIndex(e, k, -1, datum, fe+boundFallShare*(fk-fe))
	lo = min(lo, max(e-2*boundMinSide, k))
	tau, ok := s.joinPoint(lo, hi, datum, -1)
	if !ok {
		return e
	}
	return s.lastAtOrBefore(lo, hi, tau)
}

// tailLine fits the line in F above datum to the samples of [lo, e] more
// than hMin above floor (spikes left out), with t in s from t0.
func (s *Segmenter) tailLine(lo, e int, datum, floor, hMin float64, t0 int64) (a, c float64, ok bool) {
	var r run
	cnt := 0
	for j := lo; j <= e; j++ {
		if s.spikeAt(j) || s.yAt(j)-floor <= hMin {
			continue
		}
		f, g := s.fg(s.hr[j-s.base]-datum, hMin)
		w, t := g*g, float64(s.tAt(j)-t0)*1e-9
		r.w += w
		r.t += w * t
		r.tt += w * t * t
		r.f += w * f
		r.tf += w * t * f
		r.ff += w * f * f
		cnt++
	}
	if cnt < 2*boundMinSide {
		return 0, 0, false
	}
	a, c, _ = r.line()
	return a, c, c < 0
}

// tailStart is the first sample of the last boundFallShare of the fall
// [k, e] in F above datum (at least 2 boundMinSide samples before e).
func (s *Segmenter) tailStart(k, e int, datum float64) int {
	fk, _ := s.fg(s.yAt(k)-datum, 0)
	fe, _ := s.fg(s.yAt(e)-datum, 0)
	lo := s.fIndex(e, k, -1, datum, fe+boundFallShare*(fk-fe))
	return min(lo, max(e-2*boundMinSide, k))
}

// placeEmpty returns the end of a fall [k, e] that ran dry onto the
// plateau at datum: the last sample at or before the time at which the
// line fitted to the last boundFallShare of the fall in F (samples more
// than hMin above the datum) reaches F = 0. It keeps e when the line
// cannot be fitted.
func (s *Segmenter) placeEmpty(k, e, d int, datum, hMin float64) int {
	lo := s.tailStart(k, e, datum)
	t0 := s.tAt(lo)
	a, c, ok := s.tailLine(lo, e, datum, datum, hMin, t0)
	if !ok {
		return e
	}
	tau := t0 + int64(math.Round(-a/c*1e9))
	return s.lastAtOrBefore(k, d, tau)
}

// ranDry tells whether the fall [a, e] onto the plateau p ran the tank
// dry with the outlet at p (the datum is unknown or the sensor has
// drifted) rather than stopping at head p above the configured outlet (a
// valve closed). A free drain is a straight line in F above its true
// datum, and one above the wrong datum bends (most near the plateau), so
// the line is fitted in F(h - p) and in F(h) to the samples more than hMin
// above the plateau, each weighted by g² (its residuals are then heads),
// and the straighter one wins.
func (s *Segmenter) ranDry(a, e int, p, hMin float64) bool {
	sse := func(datum float64) float64 {
		var r run
		cnt := 0
		t0 := s.tAt(a)
		for j := a; j <= e; j++ {
			if s.spikeAt(j) || s.yAt(j)-p <= hMin {
				continue
			}
			f, g := s.fg(s.hr[j-s.base]-datum, hMin)
			w, t := g*g, float64(s.tAt(j)-t0)*1e-9
			r.w += w
			r.t += w * t
			r.tt += w * t * t
			r.f += w * f
			r.tf += w * t * f
			r.ff += w * f * f
			cnt++
		}
		if cnt < 2*boundMinSide {
			return math.Inf(1)
		}
		_, _, e := r.line()
		return e
	}
	return sse(p) < sse(0)
}
