package model

import (
	"math"
	"slices"
)

func (s *Segmenter) tAt(i int) int64    { return s.ht[i-s.base] }
func (s *Segmenter) yAt(i int) float64  { return s.hy[i-s.base] }
func (s *Segmenter) spikeAt(i int) bool { return s.hk[i-s.base] }

// step follows a fall or rise with filtered sample i at time t, level y
// (emit handles the quiet state).
func (s *Segmenter) step(i int, t int64, y float64) {
	switch s.state {
	case stFall:
		if y < s.ext {
			s.ext, s.iExt = y, i
		}
		if y < s.mark-s.sigma {
			s.mark, s.iMark = y, i
			s.setTimeout()
		}
		if s.slow(i, t, y) || s.leakAfter(i, t, y) {
			return
		}
		// A rise ends the fall only once it has lasted: an upward step of
		// a few samples (sensor counts, a wave, a bubble) is not a refill.
		if y > s.ext+s.trig {
			if s.riseAt < 0 {
				s.riseAt = i
			}
			if i-s.riseAt+1 >= riseConfirmSamples && t-s.tAt(s.riseAt) >= riseConfirmNs {
				k := s.kneeUp(s.iExt, i)
				s.closeIdle()
				s.finishDrain(s.knee, s.iMark, k-1)
				s.beginRise(k, i)
				return
			}
		} else if s.riseAt >= 0 {
			s.dropBlip(i)
		}
		if i <= s.blipUntil && s.hr[i-s.base] > s.blipRef {
			s.markBlip(i)
		}
		if t-s.tAt(s.iMark) > s.timeoutNs && s.stalled(t) {
			s.closeIdle()
			s.finishDrain(s.knee, s.iMark, i)
			s.toQuiet(s.iMark+1, i)
		}
	case stRise:
		if y > s.ext {
			s.ext, s.iExt = y, i
		}
		if y > s.mark+s.sigma {
			s.mark, s.iMark = y, i
			s.setTimeout()
		}
		if s.slow(i, t, y) {
			return
		}
		if y < s.ext-s.trig {
			k := s.kneeDown(s.iExt, i)
			s.closeIdle()
			s.finishFill(s.knee, s.iMark)
			s.beginFall(k, i, s.iMark)
			return
		}
		if t-s.tAt(s.iMark) > s.timeoutNs && s.stalled(t) {
			s.closeIdle()
			s.finishFill(s.knee, s.iMark)
			s.toQuiet(s.iMark+1, i)
		}
	}
}

// quietStep decides filtered sample i in the quiet state, once it is in
// the window: a fall or rise opens, metered inflow breaks the idle stretch,
// or the stretch is cut.
func (s *Segmenter) quietStep(i int, t int64, y float64) {
	if m := s.win.argMax(); y < s.yAt(m)-s.trig {
		k := s.kneeDown(m, i)
		s.beginFall(k, i, s.stateStart)
		s.idleKeep = s.idleStart
		return
	}
	if m := s.win.argMin(); y > s.yAt(m)+s.trig {
		k := s.kneeUp(m, i)
		s.beginRise(k, i)
		s.idleKeep = s.idleStart
		return
	}
	if s.metered && s.hq[i-s.base] > 0 {
		s.endIdle(i - 1)
		s.idleStart = i + 1
		s.cutAt = math.MaxInt64
		return
	}
	if i == s.idleStart {
		s.setCut()
	}
	if t >= s.cutAt {
		c := s.idleStart
		for s.tAt(c) < s.cutBound {
			c++
		}
		s.endIdle(c - 1)
		s.idleStart = c
		s.setCut()
	}
}

// setCut places the next aligned cut of the idle stretch from idleStart.
func (s *Segmenter) setCut() {
	ta := s.tAt(s.idleStart)
	x := ta + s.minIdle
	b := floorDiv(x, s.maxIdle) * s.maxIdle
	if b < x {
		b += s.maxIdle
	}
	s.cutBound = b
	s.cutAt = b + s.minIdle
	if s.cutAt < b { // overflow
		s.cutAt = math.MaxInt64
	}
}

// kneeDown finds the start of a fall that peaked at m and triggered at i:
// the last sample still within kneeSigmas σ of the plateau level P, the
// median of the level over up to 64 samples ending at the peak.
func (s *Segmenter) kneeDown(m, i int) int {
	thr := s.plateauBefore(m) - kneeSigmas*s.sigma
	for j := i; j > m; j-- {
		if s.yAt(j) >= thr {
			return j
		}
	}
	return m
}

func (s *Segmenter) kneeUp(m, i int) int {
	thr := s.plateauBefore(m) + kneeSigmas*s.sigma
	for j := i; j > m; j-- {
		if s.yAt(j) <= thr {
			return j
		}
	}
	return m
}

func (s *Segmenter) plateauBefore(m int) float64 {
	a := max(m-63, s.stateStart, s.base)
	if s.state != stQuiet {
		a = max(m-63, s.iMark)
	}
	s.scratch = s.scratch[:0]
	for j := a; j <= m; j++ {
		s.scratch = append(s.scratch, s.yAt(j))
	}
	return median(s.scratch)
}

// closeIdle ends the idle stretch that was under way when the current fall
// or rise opened: the event is real.
func (s *Segmenter) closeIdle() {
	if s.idleKeep >= 0 {
		s.idleStart = s.idleKeep
		s.idleKeep = -1
		s.endIdle(s.knee - 1)
	}
}

// slow abandons a fall (rise) that has moved less than twice the trigger
// level over the last Window and less than MinDropM in all: a leak, a drift or a
// trickle, not a drain or a fill. So does a fall of any size that has run
// at a leak's rate from its knee (leakRate), also straight after a fill.
// The idle stretch it interrupted goes on (or starts at the knee).
func (s *Segmenter) slow(i int, t int64, y float64) bool {
	if t-s.tAt(s.knee) < s.winNs {
		return false
	}
	for s.tAt(s.wj+1) <= t-s.winNs {
		s.wj++
	}
	if s.state == stFall {
		s.fallRoot(i)
	}
	leak := s.leakRate(i)
	if !leak && (s.idleKeep < 0 || math.Abs(s.yAt(s.wj)-y) >= 2*s.trig || math.Abs(s.yAt(s.knee)-s.ext) >= s.minDrop()) {
		return false
	}
	keep := s.idleKeep
	if keep < 0 {
		// a leak straight after a fill: the idle stretch starts at the knee
		keep = s.knee
	}
	if s.state == stFall && s.tAt(s.knee) >= s.emitFrom {
		s.stats.RejectedSlow++
	}
	s.toQuiet(max(s.stateStart, keep, s.wj), i)
	s.idleStart, s.idleKeep = keep, -1
	s.setCut()
	return true
}

// leakShare is the largest share of the outlet's K that a fall may show
// and still be a leak while shut rather than a drain: a drain runs at the
// outlet's K (a throttled valve at a fraction of it), a leak through the
// shell or a passing valve at a few per mille (5-80 mm/h against metres
// per hour). Falls of a leaking tank are then idle periods, which the leak
// chart reads (FitIdle), and the drain that follows starts at its own knee
// instead of being joined to them; a drain that goes on falling at a
// leak's rate after its valve closed ends there (leakAfter).
const leakShare = 0.05

// recentKCap is how many drains' K the leak-rate test keeps.
const recentKCap = 7

// fallRoot brings the running integrals of sqrt(head) over the fall up to
// sample i and the Window start s.wj: rootFall from the knee to i,
// rootHead0 from the knee to s.wj. Each sample is added once, so the
// leak tests cost O(1) a sample.
func (s *Segmenter) fallRoot(i int) {
	for ; s.rootTo < i; s.rootTo++ {
		r := s.rootHead(s.rootTo+1, 0)
		s.rootFall += 0.5 * (s.rootToR + r) * float64(s.tAt(s.rootTo+1)-s.tAt(s.rootTo)) * 1e-9
		s.rootToR = r
	}
	for ; s.rootWj < s.wj; s.rootWj++ {
		r := s.rootHead(s.rootWj+1, 0)
		s.rootHead0 += 0.5 * (s.rootWjR + r) * float64(s.tAt(s.rootWj+1)-s.tAt(s.rootWj)) * 1e-9
		s.rootWjR = r
	}
	if dw := s.rootFall - s.rootHead0; dw > 0 {
		s.winK = (s.volAt(s.yAt(s.wj)) - s.volAt(s.yAt(i))) / dw
		s.fallKMax = max(s.fallKMax, s.winK)
	} else {
		s.winK = 0
	}
}

// resetRoot starts the running integrals at the knee of a new fall.
func (s *Segmenter) resetRoot() {
	s.rootFall, s.rootHead0, s.rootTo, s.rootWj, s.fallKMax = 0, 0, s.knee, s.knee, 0
	s.rootToR = s.rootHead(s.knee, 0)
	s.rootWjR = s.rootToR
}

// leakRate reports whether the fall under way has run, from its knee to
// sample i, at less than leakShare of the outlet's K
// (SegmentOptions.OutletKM25s, else the median of the last drains emitted).
// The whole fall counts, not the last Window alone: a drain that has
// stopped (valve shut, tank empty) is flat over its last Window but ran at
// the outlet's K before. Only free falls; a fall that stays level (K 0) is
// left to the other tests.
func (s *Segmenter) leakRate(i int) bool {
	if s.state != stFall || s.metered || !(s.refK > 0) || !(s.rootFall > 0) {
		return false
	}
	kw := (s.volAt(s.yAt(s.knee)) - s.volAt(s.yAt(i))) / s.rootFall
	return kw > 0 && kw < leakShare*s.refK
}

// leakAfter ends a drain that goes on falling at a leak's rate: over the
// last Window the level still falls (by more than twice the trigger level,
// so the stall test would not end it) but at less than leakShare of the K
// the fall showed before (the largest mass-balance K over a Window of the
// fall so far, fallKMax). With no head at all over the Window (the level
// below the outlet) any fall is a leak's. The valve closed (or
// the outlet ran dry) and a leak lowers the level on; the drain ends at the
// Window's start, placed from the physics by finishDrain, and the leak's
// fall is an idle period. Free falls of at least two Windows only.
func (s *Segmenter) leakAfter(i int, t int64, y float64) bool {
	if s.metered || t-s.tAt(s.knee) < 2*s.winNs || s.yAt(s.wj)-y < 2*s.trig {
		return false
	}
	kd := s.fallKMax
	if !(kd > 0) {
		return false
	}
	if s.rootFall-s.rootHead0 > 0 {
		if kw := s.winK; !(kw > 0 && kw < leakShare*kd) {
			return false
		}
	} else if s.linked || s.yAt(s.wj) > 0 {
		// no head over the whole Window: below the outlet nothing but a
		// leak lowers the level (a linked outlet may run backwards)
		return false
	}
	e := s.wj
	s.closeIdle()
	s.finishDrain(s.knee, e, i)
	s.toQuiet(e+1, i)
	return true
}

// dropBlip ends an upward step inside the fall that did not last (the
// level is back at i): its samples, from two before the first median of
// the step (the median lags the raw reading by two samples) to two after
// i, are set aside as spikes when they read more than half the trigger
// level above the level before the step.
func (s *Segmenter) dropBlip(i int) {
	s.blipRef = s.yAt(max(s.riseAt-1, s.base)) + 0.5*s.trig
	s.blipUntil = i + 2
	for j := max(s.riseAt-2, s.base); j < i; j++ {
		if s.hr[j-s.base] > s.blipRef {
			s.markBlip(j)
		}
	}
	s.riseAt = -1
}

func (s *Segmenter) markBlip(j int) {
	if x := j - s.base; !s.hk[x] {
		s.hk[x] = true
		s.stats.Spikes++
	}
}

// beginFall opens a fall at knee k, triggered at i; the hold before it
// began at sample pre.
func (s *Segmenter) beginFall(k, i, pre int) {
	s.state, s.knee, s.wj, s.idleKeep, s.riseAt, s.blipUntil = stFall, k, k, -1, -1, -1
	s.resetRoot()
	s.pre = min(max(pre, k-boundPreMax, s.base), k)
	s.ext, s.iExt = s.yAt(k), k
	s.mark, s.iMark = s.yAt(k), k
	for j := k + 1; j <= i; j++ {
		y := s.yAt(j)
		if y < s.ext {
			s.ext, s.iExt = y, j
		}
		if y < s.mark-s.sigma {
			s.mark, s.iMark = y, j
		}
	}
	s.setTimeout()
}

func (s *Segmenter) beginRise(k, i int) {
	s.state, s.knee, s.wj, s.idleKeep = stRise, k, k, -1
	s.ext, s.iExt = s.yAt(k), k
	s.mark, s.iMark = s.yAt(k), k
	for j := k + 1; j <= i; j++ {
		y := s.yAt(j)
		if y > s.ext {
			s.ext, s.iExt = y, j
		}
		if y > s.mark+s.sigma {
			s.mark, s.iMark = y, j
		}
	}
	s.setTimeout()
}

// setTimeout sets the stall time after the last mark:
// clamp(max(elapsed/4, 4 σ/rate, 5 samples, 2 min), stall cap). The marks
// come with almost every sample of a fall, and the stall time matters only
// once the quiet time since the mark exceeds its floor min(2 min, stall
// cap): timeoutNs holds that floor until stalled works out the value, from
// the σ saved here.
func (s *Segmenter) setTimeout() {
	s.toSigma, s.toDirty = s.sigma, true
	s.timeoutNs = min(int64(120e9), s.stallNs)
}

// stalled reports whether the fall (rise) has stalled at time t, given
// that t is more than timeoutNs after the last mark.
func (s *Segmenter) stalled(t int64) bool {
	if s.toDirty {
		s.toDirty = false
		s.timeoutNs = s.stallTime()
		return t-s.tAt(s.iMark) > s.timeoutNs
	}
	return true
}

// stallTime is the stall time of setTimeout for the current mark.
func (s *Segmenter) stallTime() int64 {
	el := s.tAt(s.iMark) - s.tAt(s.knee)
	to := max(el/4, int64(120e9))
	if n := s.iMark - s.knee; n > 0 {
		to = max(to, 5*(el/int64(n)))
		if d := math.Abs(s.yAt(s.knee) - s.yAt(s.iMark)); d > 0 {
			r := d / (float64(el) * 1e-9) // m/s
			if x := 4 * s.toSigma / r * 1e9; x < float64(s.stallNs) {
				to = max(to, int64(x))
			} else {
				to = s.stallNs
			}
		}
	}
	return min(to, s.stallNs)
}

func (s *Segmenter) toQuiet(f, i int) {
	s.state, s.stateStart, s.idleStart = stQuiet, f, f
	s.win.reset()
	s.cutAt = math.MaxInt64
	if f > i {
		return
	}
	s.setCut()
	lo := s.tAt(i) - s.winNs
	for j := f; j <= i; j++ {
		if s.tAt(j) < lo {
			continue
		}
		s.win.push(j, s.tAt(j), s.yAt(j))
	}
}

// breakAt ends whatever was under way before a long gap at sample i.
func (s *Segmenter) breakAt(i int) {
	switch s.state {
	case stFall:
		s.closeIdle()
		s.finishDrain(s.knee, s.iMark, i-1)
	case stRise:
		s.closeIdle()
		s.finishFill(s.knee, s.iMark)
	default:
		s.endIdle(i - 1)
	}
	s.toQuiet(i, i-1)
}

func (s *Segmenter) endIdle(b int) {
	a := s.idleStart
	if b < a || a < s.base {
		return
	}
	if s.tAt(b)-s.tAt(a) < s.minIdle {
		return
	}
	g := Segment{Tank: s.id, Kind: Idle, RawStartNs: s.tAt(a), RawEndNs: s.tAt(b), EmptyHeadM: math.NaN()}
	s.fillSamples(&g, a, b)
	s.queue = append(s.queue, g)
}

// fillSamples copies the non-spike samples of [a, b] into g and counts
// spikes and gaps.
func (s *Segmenter) fillSamples(g *Segment, a, b int) {
	x0, x1 := a-s.base, b-s.base+1
	sp := 0
	for _, k := range s.hk[x0:x1] {
		if k {
			sp++
		}
	}
	g.Spikes, g.GapCount = sp, s.gaps(a, b)
	if sp == 0 {
		// the common case: whole runs, copied without a per-sample test
		g.TimeNs = slices.Clone(s.ht[x0:x1])
		g.HeadM = slices.Clone(s.hr[x0:x1])
		if s.metered {
			g.InflowM3s = slices.Clone(s.hq[x0:x1])
		}
		if s.linked {
			g.SubmergedM = slices.Clone(s.hs[x0:x1])
		}
		return
	}
	n := x1 - x0 - sp
	g.TimeNs = make([]int64, 0, n)
	g.HeadM = make([]float64, 0, n)
	if s.metered {
		g.InflowM3s = make([]float64, 0, n)
	}
	if s.linked {
		g.SubmergedM = make([]float64, 0, n)
	}
	for x := x0; x < x1; x++ {
		if s.hk[x] {
			continue
		}
		g.TimeNs = append(g.TimeNs, s.ht[x])
		g.HeadM = append(g.HeadM, s.hr[x])
		if s.metered {
			g.InflowM3s = append(g.InflowM3s, s.hq[x])
		}
		if s.linked {
			g.SubmergedM = append(g.SubmergedM, s.hs[x])
		}
	}
}

// gaps counts the steps longer than the gap limit between samples of [a, b].
func (s *Segmenter) gaps(a, b int) int {
	n := 0
	t := s.ht[a-s.base : b-s.base+1]
	for j := 1; j < len(t); j++ {
		if t[j]-t[j-1] > s.gapNs {
			n++
		}
	}
	return n
}

func (s *Segmenter) finishFill(k, e int) {
	if e <= k {
		return
	}
	if s.tAt(e)-s.tAt(k) < s.minDurNs || s.yAt(e)-s.yAt(k) < s.minDrop() {
		return
	}
	sp, gaps := 0, 0
	for j := k; j <= e; j++ {
		if s.spikeAt(j) {
			sp++
		}
		if j > k && s.tAt(j)-s.tAt(j-1) > s.gapNs {
			gaps++
		}
	}
	s.queue = append(s.queue, Segment{
		Tank: s.id, Kind: Fill,
		TimeNs:     []int64{s.tAt(k), s.tAt(e)},
		HeadM:      []float64{s.yAt(k), s.yAt(e)},
		RawStartNs: s.tAt(k), RawEndNs: s.tAt(e),
		EmptyHeadM: math.NaN(), Spikes: sp, GapCount: gaps,
	})
}

func (s *Segmenter) minDrop() float64 {
	if s.opt.MinDropM > 0 {
		return s.opt.MinDropM
	}
	return max(0.05, 20*s.sigma)
}

// finishDrain judges the fall from knee k to the last mark e, with the
// plateau (e, d] after it. The start and the end are placed from the
// physics (see segment_bounds.go): the join of the hold and the fall in
// F, the join of the fall and the hold after it, or the time the line in
// F reaches zero on a drain that ran dry.
func (s *Segmenter) finishDrain(k, e, d int) {
	if e <= k {
		s.rejectFall(k, max(e, k), 0, FallTooSmall)
		return
	}
	// The plateau after the fall starts where the level first comes
	// within kneeSigmas σ of its lowest value: the last mark may lie on
	// the plateau itself when noise made new lows there.
	lowest := s.yAt(e)
	for j := e + 1; j <= d; j++ {
		lowest = min(lowest, s.yAt(j))
	}
	for j := k + 1; j < e; j++ {
		if s.yAt(j) <= lowest+kneeSigmas*s.sigma {
			e = j
			break
		}
	}
	// plateau median
	p := math.NaN()
	s.scratch = s.scratch[:0]
	for j := max(e+1, d-4096); j <= d; j++ {
		if !s.spikeAt(j) {
			s.scratch = append(s.scratch, s.hr[j-s.base])
		}
	}
	if len(s.scratch) >= 3 {
		p = median(s.scratch)
		// the fall ends where the level comes within kneeSigmas σ of the plateau
		for e > k+1 && s.yAt(e) < p+kneeSigmas*s.sigma {
			e--
		}
	}
	if kk := s.placeStart(s.pre, k, e, 0); kk < e {
		k = kk
	}
	tk := s.tAt(k)
	drop := s.yAt(k) - s.yAt(e)
	if s.tAt(e)-tk < s.minDurNs {
		s.rejectFall(k, e, drop, FallTooShort)
		return
	}
	if drop < s.minDrop() {
		s.rejectFall(k, e, drop, FallTooSmall)
		return
	}
	tol := s.opt.EmptyHeadM
	if !(tol > 0) {
		tol = max(5*s.sigma, 0.01*drop)
	}
	a := s.afterTransient(k, e)
	complete := false
	if !math.IsNaN(p) {
		bc := e
		for bc > a && s.yAt(bc) < p+tol {
			bc--
		}
		// A fall fed by metered inflow does not arrive on its plateau the
		// way a free drain does: only a plateau at zero head is the outlet.
		// Nor is a plateau more than dryShare of the drop away from zero:
		// no datum error or sensor drift is that large, a valve closed.
		complete = math.Abs(p) <= tol || bc > a && math.Abs(p) <= dryShare*drop && !s.inflowIn(k, d) && s.ranDry(a, e, p, tol)
	}
	datum := 0.0
	switch {
	case complete:
		datum = p
		e = s.placeEmpty(k, e, d, p, tol)
	case !math.IsNaN(p):
		if ee := s.placeClose(k, e, d, 0); ee > k {
			e = ee
		}
	}
	a = s.afterTransient(k, e)
	b := e
	if complete {
		for b > a && s.yAt(b) < p+tol {
			b--
		}
	}
	kept, all := 0, 0
	for j := k; j <= b; j++ {
		if !s.spikeAt(j) {
			all++
			if j >= a {
				kept++
			}
		}
	}
	if kept < minDrainSamples {
		why := FallFewSamples
		if all >= minDrainSamples {
			why = FallTransientOnly
		}
		s.rejectFall(k, e, drop, why)
		return
	}
	r := s.kRatio(a, b, datum)
	if !(r >= ratioLo && r <= ratioHi) || !s.metered && s.feedDip(a, b, datum) {
		s.rejectFall(k, e, drop, FallInflow)
		return
	}
	if km := s.massK(a, b, datum); km > 0 && !(s.opt.OutletKM25s > 0) {
		s.recentK = append(s.recentK, km)
		if len(s.recentK) > recentKCap {
			s.recentK = s.recentK[1:]
		}
		if len(s.recentK) >= 3 {
			s.refK = median(slices.Clone(s.recentK))
		}
	}
	g := Segment{Tank: s.id, Kind: Drain, RawStartNs: tk, RawEndNs: s.tAt(e), Complete: complete, EmptyHeadM: math.NaN()}
	if complete {
		g.EmptyHeadM = p
	}
	s.fillSamples(&g, a, b)
	// spikes and gaps over the whole fall, not only the kept part
	sp, gaps := 0, 0
	for j := k; j <= e; j++ {
		if s.spikeAt(j) {
			sp++
		}
		if j > k && s.tAt(j)-s.tAt(j-1) > s.gapNs {
			gaps++
		}
	}
	g.Spikes, g.GapCount = sp, gaps
	s.queue = append(s.queue, g)
}

// inflowIn reports whether metered inflow ran during [a, b].
func (s *Segmenter) inflowIn(a, b int) bool {
	if !s.metered {
		return false
	}
	for _, q := range s.hq[a-s.base : b-s.base+1] {
		if q > 0 {
			return true
		}
	}
	return false
}

// afterTransient is the first sample of [k, e] at least the transient
// time after k (e when none).
func (s *Segmenter) afterTransient(k, e int) int {
	a, tk := k, s.tAt(k)
	for a < e && s.tAt(a)-tk < s.transNs {
		a++
	}
	return a
}

// kRatio is K over the second half of [a, b] divided by K over the first,
// each from the mass balance K = (V(h_i) - V(h_j) + ∫q dt) / ∫sqrt(h - datum) dt
// on the median-of-5 level. NaN when a half is too short.
func (s *Segmenter) kRatio(a, b int, datum float64) float64 {
	if b-a < 4 {
		return math.NaN()
	}
	tm := s.tAt(a) + (s.tAt(b)-s.tAt(a))/2
	m := a + 1
	for m < b-1 && s.tAt(m) < tm {
		m++
	}
	k1 := s.massK(a, m, datum)
	k2 := s.massK(m, b, datum)
	return k2 / k1
}

func (s *Segmenter) massK(i, j int, datum float64) float64 {
	num := s.volAt(s.yAt(i)-datum) - s.volAt(s.yAt(j)-datum)
	den := 0.0
	r0 := s.rootHead(i, datum)
	for x := i + 1; x <= j; x++ {
		r1 := s.rootHead(x, datum)
		dt := float64(s.tAt(x)-s.tAt(x-1)) * 1e-9
		den += 0.5 * (r0 + r1) * dt
		if s.metered {
			q0, q1 := s.hq[x-1-s.base], s.hq[x-s.base]
			if q0 > 0 || q1 > 0 {
				num += 0.5 * (max(q0, 0) + max(q1, 0)) * dt
			}
		}
		r0 = r1
	}
	return num / den
}

// rootHead is sgn(Δ) sqrt(|Δ|) at sample x, Δ the head across the
// outlet: the level above the outlet less, for a linked outlet, the
// receiving level above it (a missing one counts as below the outlet).
func (s *Segmenter) rootHead(x int, datum float64) float64 {
	d := max(s.yAt(x)-datum, 0)
	if s.linked {
		if r := s.hs[x-s.base]; r > 0 {
			d -= r
		}
	}
	return math.Copysign(math.Sqrt(math.Abs(d)), d)
}

// volAt is the volume above the outlet at head h (m^3).
func (s *Segmenter) volAt(h float64) float64 {
	if s.tank == nil || s.tank.Shape == nil {
		return h
	}
	e := s.tank.OutletElevM
	return s.tank.Shape.VolumeM3(h+e) - s.tank.Shape.VolumeM3(e)
}
