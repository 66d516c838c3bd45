package model

import (
	"math"
	"time"
)

// SegmentOptions tunes the Segmenter. The zero value selects the documented
// defaults; several defaults scale with the noise level σ of the reading.
type SegmentOptions struct {
	// MinDropM is the smallest fall (m, smoothed level) kept as a drain.
	// Default max(0.05 m, 20 σ).
	MinDropM float64
	// MinDuration is the shortest fall kept as a drain (and rise kept as a
	// fill). Default 2 min.
	MinDuration time.Duration
	// Transient is trimmed from the start of each drain (valve opening).
	// Default 15 s; a negative value trims nothing.
	Transient time.Duration
	// EmptyHeadM: on a complete drain, the tail whose smoothed head is within
	// EmptyHeadM of the empty plateau is trimmed, and a plateau within
	// EmptyHeadM of zero head is taken as the outlet. Default max(5 σ, 1 % of
	// the drop).
	EmptyHeadM float64
	// GapLimit: a step between samples longer than this is counted as a gap
	// (Segment.GapCount). Default 5 min. A gap longer than the stall limit
	// (see Settle) ends whatever was under way.
	GapLimit time.Duration
	// NoiseM is the standard deviation of the reading (m). 0 estimates it
	// robustly from the data: 1.4826 × median|second difference| / sqrt(6)
	// per 10-minute block (aligned to Unix time), median over the last 48
	// blocks.
	NoiseM float64
	// Settle holds back a segment until the data reach Settle past its end:
	// it may still be under way. It also caps the quiet time that ends a
	// drain or fill, so a pause longer than Settle always splits a drain.
	// Default 30 min; a negative value releases segments as soon as they
	// are decided (the stall cap is then 30 min).
	Settle time.Duration
	// MinIdle is the shortest idle period emitted. Default 1 h.
	MinIdle time.Duration
	// MaxIdle bounds the length of one idle segment: long idle stretches are
	// cut at multiples of MaxIdle since the Unix epoch, so that every scan
	// cuts them at the same instants. Default 24 h (UTC midnights).
	MaxIdle time.Duration
	// Window is the time over which a fall (rise) must exceed the trigger
	// level, max(6 σ, 3 mm), to open a drain (fill). It sets the slowest
	// event seen: trigger/Window (default 30 min: 6 mm/h at σ ≤ 0.5 mm).
	Window time.Duration
	// EmitFromNs drops segments with RawStartNs < EmitFromNs: an earlier
	// scan emitted them. 0 means no limit.
	EmitFromNs int64
	// OutletKM25s is the outlet constant the tank's drains show (its
	// baseline), m^2.5/s; 0 when not known yet, and the median of the last
	// drains this Segmenter emitted stands in. A fall far slower than the
	// outlet allows (see leakShare) is a leak while shut, not a drain.
	OutletKM25s float64
}

// SegmentStats counts what a Segmenter saw and decided. Falls counts
// every fall that opened (dropped more than the trigger level) and was
// decided, except those starting before EmitFromNs (an earlier scan
// counted them): each is emitted as a drain, rejected for one reason, or
// still pending at Flush.
type SegmentStats struct {
	Samples int // samples accepted
	Invalid int // samples rejected: non-finite head or time not increasing
	Spikes  int // samples flagged as spikes
	Drains  int // drain segments emitted
	Idles   int // idle segments emitted
	Fills   int // fill segments emitted
	Falls   int // falls seen (see above)
	// rejected falls, by reason (see FallOutcome)
	RejectedShort     int // shorter than MinDuration
	RejectedSmall     int // fell less than MinDropM
	RejectedFew       int // fewer than 6 samples
	RejectedTransient int // fewer than 6 samples once the valve transient is trimmed
	RejectedInflow    int // inconsistent with gravity outflow alone (unmetered inflow)
	RejectedSlow      int // falls abandoned as too slow for a drain (a leak, a drift, a trickle); not in Falls
	Pending           int // at Flush: under way, or ending within Settle of the last sample
	Dropped           int // segments dropped because RawStartNs < EmitFromNs
}

// FallOutcome is what became of one fall.
type FallOutcome int

// The outcomes of a fall.
const (
	FallDrain         FallOutcome = iota + 1 // emitted as a drain
	FallTooShort                             // shorter than MinDuration
	FallTooSmall                             // fell less than MinDropM
	FallFewSamples                           // fewer than 6 samples
	FallTransientOnly                        // fewer than 6 samples after the valve transient
	FallInflow                               // slowed down more than outflow alone allows: something flowed in
	FallPending                              // under way or within Settle of the last sample at Flush
)

var fallNames = [...]string{"", "drain", "too short", "too small", "too few samples", "transient only", "inflow", "pending"}

func (o FallOutcome) String() string {
	if o > 0 && int(o) < len(fallNames) {
		return fallNames[o]
	}
	return "unknown"
}

// Fall is one fall the Segmenter decided: its start and end as placed
// (Unix ns), how far the level fell (m) and what became of it.
type Fall struct {
	StartNs, EndNs int64
	DropM          float64
	Outcome        FallOutcome
}

// DefaultSettle is the settle delay used when SegmentOptions.Settle is 0.
const DefaultSettle = 30 * time.Minute

const (
	noiseFloorM     = 1e-4 // smallest σ used, m
	noiseDefaultM   = 1e-3 // σ used before any estimate, m
	trigFloorM      = 3e-3 // smallest trigger level, m (a few quantisation steps of common sensors)
	trigSigmas      = 6.0  // trigger level in σ
	spikeSigmas     = 6.0  // spike threshold in σ
	kneeSigmas      = 1.5  // knee tolerance in σ of the raw reading (≈ 2.7 σ of the median-of-5)
	minDrainSamples = 6    // fewest kept samples in a drain
	// an upward step inside a fall ends it only after lasting this long
	// (median-of-5 samples and time): a few samples of a few counts or σ
	// are a sensor artefact, a refill goes on
	riseConfirmSamples = 6
	riseConfirmNs      = int64(60e9)
	// a plateau further than this share of the drop from zero head is a
	// valve closed, never the outlet (a datum error or drift that large is
	// not credible)
	dryShare = 0.2
	ratioLo  = 0.6 // accepted range of K(second half)/K(first half)
	ratioHi  = 1.6
)

const (
	stQuiet = iota
	stFall
	stRise
)

// Segmenter cuts a level history into drains, idle periods and fills,
// incrementally: Push the samples in time order, in chunks of any size, and
// Take the segments as they are decided. Memory is bounded by the longest
// drain, fill or idle segment (≤ MaxIdle + MinIdle), never by the history.
//
// The method, per sample, O(1) amortised:
//
//  1. Input check: samples with a non-finite head or a time not after the
//     previous one are dropped (counted in Stats().Invalid).
//  2. Noise σ (unless given): robust scatter of second differences.
//  3. Spikes: a Hampel filter on a centred window of 5 samples; a sample
//     further than max(6 σ, 3 mm) from the window median and from both its
//     neighbours is a spike. The median-of-5 level y is exact on any
//     monotone curve, so it keeps the knees of a drain, and it drives all
//     decisions below.
//  4. Events: a fall (rise) opens when y drops (rises) more than
//     max(6 σ, 3 mm) below (above) its maximum (minimum) over Window. The
//     provisional start (knee) is the last sample still within 1.5 σ of
//     the level before it. A fall ends when y has made no new low (by σ)
//     for the stall time clamp(max(elapsed/4, 4 σ/rate, 5 samples, 2 min),
//     ≤ Settle), or when it rises again by the trigger level for at least
//     6 samples and 1 min: a shorter upward step (a few sensor counts) is
//     set aside as spikes and the fall goes on.
//  5. Boundaries from the physics (segment_bounds.go): the head transform
//     F(h) is linear in time during a free drain and flat in a hold, so
//     the start is the join point of a two-phase line fit in F over the
//     hold and the first part of the fall, a valve closure the join of
//     the last part and the hold after it, and a drain that ran dry ends
//     where its line in F reaches zero. Whether it ran dry (Complete) is
//     decided from the plateau after it (median reading p): |p| ≤
//     EmptyHeadM, or else (p within a fifth of the drop of zero and no
//     metered inflow) the fall is straighter in F(h - p) than in F(h).
//  6. A drain is kept when it falls at least MinDropM over at least
//     MinDuration. The transient and, when complete, the empty tail are
//     trimmed. Finally the mass balance K = (ΔV + ∫q dt)/∫sqrt(h) dt over
//     the first and the second half must agree within a factor 1.6: a fall
//     fed by unmetered inflow slows down far more than the square-root law
//     allows and is rejected. Every fall's outcome is counted (Stats) and
//     listed (TakeFalls). A drain that a later check on its fit rejects
//     (InflowSuspected, against the tank's own drains) is moved to that
//     outcome with Reject.
//  7. Quiet stretches of at least MinIdle are idle segments (broken by
//     metered inflow and cut at multiples of MaxIdle).
//
// Results do not depend on how the samples are split into Push calls.
// A Segmenter is not safe for concurrent use.
type Segmenter struct {
	tank     *Tank
	xf       *HeadTransform // the tank's head transform; nil: unit-area vertical tank
	id       string
	opt      SegmentOptions
	minDurNs int64
	transNs  int64
	gapNs    int64
	settleNs int64
	stallNs  int64
	minIdle  int64
	maxIdle  int64
	winNs    int64
	emitFrom int64

	meterSet bool
	metered  bool
	linked   bool // the outlet discharges into a vessel whose level is known (PushSubmerged)
	finished bool
	final    bool // FlushFinal: the settle delay no longer holds segments back
	firstT   int64
	lastT    int64 // last accepted input time
	n        int   // accepted samples

	noise noiseEstimator
	sigma float64
	trig  float64
	hthr  float64

	// last 5 accepted input samples, by accepted index mod 5
	rt   [5]int64
	rh   [5]float64
	rq   [5]float64
	rs   [5]float64 // receiving level above the outlet (linked only)
	rk   [5]int64   // fkey of rh
	rpos int
	// the two previous accepted samples, for the noise estimate
	t1, t2   int64
	h1, h2   float64
	estimate bool

	// history of filtered samples from absolute index base on, one slice
	// per field (hq only when metered)
	base int
	ht   []int64
	hr   []float64 // raw reading, m
	hy   []float64 // median-of-5 level, m
	hq   []float64 // metered inflow, m^3/s
	hs   []float64 // receiving level above the outlet, m (linked only)
	hk   []bool    // spike
	done int       // samples processed by the detector

	state      int
	stateStart int
	idleStart  int
	cutAt      int64 // time at which the idle stretch is cut at cutBound
	cutBound   int64
	win        extremes // level extremes over Window, in the quiet state
	knee       int
	riseAt     int     // first sample of an upward step inside the current fall; -1: none
	blipUntil  int     // last sample of an upward step that did not last; -1: none
	blipRef    float64 // readings above it up to blipUntil belong to that step
	pre        int     // first sample of the hold before the current fall
	idleKeep   int     // idle start to resume if the current fall/rise proves slow; -1: none
	wj         int     // sample about Window before the current one, in a fall/rise
	ext        float64 // running extreme since the knee (min for a fall, max for a rise)
	iExt       int
	mark       float64
	iMark      int
	timeoutNs  int64   // stall time after the mark, or its floor while toDirty
	toSigma    float64 // σ when the mark was set
	toDirty    bool
	prevT      int64

	recentK       []float64 // mass-balance K of the last drains emitted (newest last), for the leak-rate test
	refK          float64   // outlet K the leak tests compare with: OutletKM25s, else the median of recentK (0: not yet)
	rootFall      float64   // ∫ sqrt(head) dt from the knee of the fall under way to sample rootTo
	rootHead0     float64   // the same to sample rootWj (the Window's start)
	rootTo        int       // last sample in rootFall
	rootWj        int       // last sample in rootHead0
	rootToR       float64   // sqrt(head) at rootTo
	rootWjR       float64   // sqrt(head) at rootWj
	winK          float64   // mass-balance K over the last Window of the fall (from s.wj)
	fallKMax      float64   // largest winK of the fall so far
	queue         []Segment
	ready         []Segment
	lastEmitStart int64
	anyEmit       bool
	stats         SegmentStats
	falls         []Fall
	scratch       []float64
	boundIdx      []int
	bsums         boundSums
}

// NewSegmenter returns a Segmenter for tank t (its ID names the segments and
// its shape turns heads into volumes; nil means a unit-area vertical tank).
func NewSegmenter(t *Tank, opt SegmentOptions) *Segmenter {
	s := &Segmenter{tank: t, opt: opt}
	if t != nil {
		s.id = t.ID
		if t.Shape != nil {
			// an invalid tank falls back to the unit-area transform
			s.xf, _ = TransformFor(t)
		}
	}
	dur := func(d, def time.Duration) int64 {
		if d == 0 {
			return int64(def)
		}
		return int64(d)
	}
	s.minDurNs = dur(opt.MinDuration, 2*time.Minute)
	s.transNs = max(dur(opt.Transient, 15*time.Second), 0)
	s.gapNs = dur(opt.GapLimit, 5*time.Minute)
	s.settleNs = dur(opt.Settle, DefaultSettle)
	s.stallNs = s.settleNs
	if s.settleNs <= 0 {
		s.settleNs = 0
		s.stallNs = int64(30 * time.Minute)
	}
	s.minIdle = max(dur(opt.MinIdle, time.Hour), 1)
	s.maxIdle = max(dur(opt.MaxIdle, 24*time.Hour), 2*s.minIdle)
	s.winNs = max(dur(opt.Window, 30*time.Minute), 1)
	s.emitFrom = opt.EmitFromNs
	s.refK = max(opt.OutletKM25s, 0)
	if s.emitFrom == 0 {
		s.emitFrom = math.MinInt64
	}
	s.estimate = !(opt.NoiseM > 0)
	s.noise.init()
	s.setSigma()
	s.cutAt = math.MaxInt64
	s.idleKeep = -1
	s.riseAt, s.blipUntil = -1, -1
	return s
}

// Stats returns the counters so far.
func (s *Segmenter) Stats() SegmentStats {
	st := s.stats
	st.Samples = s.n
	return st
}

// NoiseM returns the noise level σ in use (m).
func (s *Segmenter) NoiseM() float64 { return s.sigma }

func (s *Segmenter) setSigma() {
	sg := s.opt.NoiseM
	if !(sg > 0) {
		sg = s.noise.sigma
	}
	if !(sg >= noiseFloorM) { // also catches NaN
		sg = noiseFloorM
	}
	if sg > 1 {
		sg = 1
	}
	s.sigma = sg
	s.trig = max(trigSigmas*sg, trigFloorM)
	s.hthr = max(spikeSigmas*sg, trigFloorM)
}

// Push feeds samples in time order. timeNs and headM must have the same
// length; inflowM3s is nil without an inflow meter, else the same length.
// Whether the tank is metered is fixed by the first Push with data. Invalid
// samples are dropped and counted, never a panic. Push after Flush panics.
func (s *Segmenter) Push(timeNs []int64, headM, inflowM3s []float64) {
	s.PushSubmerged(timeNs, headM, inflowM3s, nil)
}

// PushSubmerged is Push for an outlet that discharges into another vessel:
// submergedM (nil, or the same length) is that vessel's liquid level above
// the outlet at each sample (see Series.SubmergedM). Whether the outlet is
// linked is fixed, like the meter, by the first call with data; the
// segments then carry it and the mass-balance test uses the head across
// the outlet.
func (s *Segmenter) PushSubmerged(timeNs []int64, headM, inflowM3s, submergedM []float64) {
	if s.finished {
		panic("model: Segmenter.Push after Flush")
	}
	if len(headM) != len(timeNs) || (inflowM3s != nil && len(inflowM3s) != len(timeNs)) || (submergedM != nil && len(submergedM) != len(timeNs)) {
		panic("model: Segmenter.Push with slices of different lengths")
	}
	if len(timeNs) == 0 {
		return
	}
	if !s.meterSet {
		s.meterSet = true
		s.metered = inflowM3s != nil
		s.linked = submergedM != nil
	}
	nan := math.NaN()
	for i, t := range timeNs {
		h := headM[i]
		// h-h is NaN, not 0, exactly when h is NaN or infinite
		if h-h != 0 || (s.n > 0 && t <= s.lastT) {
			s.stats.Invalid++
			continue
		}
		q := nan
		if s.metered && inflowM3s != nil {
			q = inflowM3s[i]
		}
		sub := nan
		if s.linked && submergedM != nil {
			sub = submergedM[i]
		}
		// accept (t, h, q): the noise estimate, the ring of the last five
		// samples, and the filtered sample two back
		n := s.n
		if n == 0 {
			s.firstT = t
		}
		if s.estimate && n >= 2 && t-s.t1 <= s.gapNs && s.t1-s.t2 <= s.gapNs {
			ad2 := math.Abs(h - 2*s.h1 + s.h2)
			if e := &s.noise; e.inBlock(t) {
				// noiseEstimator.add without a call, for the common case
				if len(e.d2) < noiseBlockCap && ad2 == ad2 {
					e.d2 = append(e.d2, ad2)
				}
			} else if e.add(t, ad2) {
				s.setSigma()
			}
		}
		s.t2, s.h2 = s.t1, s.h1
		s.t1, s.h1 = t, h
		p := s.rpos
		s.rt[p], s.rh[p], s.rq[p], s.rs[p], s.rk[p] = t, h, q, sub, fkey(h)
		if p++; p == 5 {
			p = 0
		}
		s.rpos = p
		s.n = n + 1
		s.lastT = t
		if n >= 4 {
			// p is now the slot of sample n-4; sample n-2 sits two slots on
			j := p + 2
			if j >= 5 {
				j -= 5
			}
			s.emit(n-2, j, unkey(med5k(s.rk[0], s.rk[1], s.rk[2], s.rk[3], s.rk[4])))
		} else if n >= 2 {
			s.filter(n-2, n)
		}
		if n&4095 == 4095 {
			s.compact()
		}
	}
	s.compact()
}

// med5 is the median of five values without data-dependent branches: f and
// g are the second and third smallest of a..d in some order, and the median
// of five is the median of e, f and g. The values are compared as
// order-preserving integer keys (see fkey), for which the builtin min and max
// are single conditional moves; the inputs are never NaN.
func med5(a, b, c, d, e float64) float64 {
	return unkey(med5k(fkey(a), fkey(b), fkey(c), fkey(d), fkey(e)))
}

// med5k is med5 on the keys: the accepted samples keep theirs in the ring.
func med5k(ka, kb, kc, kd, ke int64) int64 {
	f := max(min(ka, kb), min(kc, kd))
	g := min(max(ka, kb), max(kc, kd))
	return max(min(ke, f), min(max(ke, f), g))
}

// fkey maps a non-NaN float64 to an int64 with the same order (-0 sorts
// just below +0): non-negative values keep their bits, negative ones have
// all but the sign bit flipped.
func fkey(x float64) int64 {
	b := int64(math.Float64bits(x))
	return b ^ (b >> 63 & math.MaxInt64)
}

// unkey inverts fkey.
func unkey(k int64) float64 {
	return math.Float64frombits(uint64(k ^ (k >> 63 & math.MaxInt64)))
}

// filter emits filtered sample j using accepted samples up to hi.
func (s *Segmenter) filter(j, hi int) {
	lo := max(j-2, 0)
	var w [5]float64
	m := 0
	for k := lo; k <= hi; k++ {
		v := s.rh[k%5]
		// insertion sort
		x := m
		for x > 0 && w[x-1] > v {
			w[x] = w[x-1]
			x--
		}
		w[x] = v
		m++
	}
	var med float64
	if m&1 == 1 {
		med = w[m/2]
	} else {
		med = 0.5 * (w[m/2-1] + w[m/2])
	}
	s.emit(j, j%5, med)
}

// emit appends filtered sample j (ring slot p, window median med) to the
// history and runs the event detector on it: a long gap ends whatever was
// under way; in the quiet state the window extremes are updated here, and
// quietStep is called only when a fall or rise opens, metered inflow
// breaks the idle stretch or it is cut; step follows a fall or rise.
func (s *Segmenter) emit(j, p int, med float64) {
	raw, t := s.rh[p], s.rt[p]
	spike := math.Abs(raw-med) > s.hthr
	if spike {
		// a spike is a lone sample: one that stays close to a neighbour
		// is a sharp corner of the level (the top of a fill that turns at
		// once into a drain), not a spike
		if j > 0 && math.Abs(raw-s.rh[(p+4)%5]) <= s.hthr || j+1 < s.n && math.Abs(raw-s.rh[(p+1)%5]) <= s.hthr {
			spike = false
		}
	}
	if spike {
		s.stats.Spikes++
	}
	s.ht = append(s.ht, t)
	s.hr = append(s.hr, raw)
	s.hy = append(s.hy, med)
	s.hk = append(s.hk, spike)
	if s.metered {
		s.hq = append(s.hq, s.rq[p])
	}
	if s.linked {
		s.hs = append(s.hs, s.rs[p])
	}
	if j > 0 && t-s.prevT > s.stallNs {
		s.breakAt(j)
	}
	s.prevT = t
	if s.state == stQuiet {
		w := &s.win
		w.push(j, t, med)
		lo := t - s.winNs
		for w.oldestT() < lo {
			w.popFront()
		}
		yMax, _ := w.top()
		yMin, _ := w.bottom()
		if med < yMax-s.trig || med > yMin+s.trig || s.metered || j == s.idleStart || t >= s.cutAt {
			s.quietStep(j, t, med)
		}
	} else {
		s.step(j, t, med)
	}
	s.done = j + 1
}

// Take returns the segments released since the last Take, in time order.
func (s *Segmenter) Take() []Segment {
	s.release()
	out := s.ready
	s.ready = nil
	return out
}

// TakeFalls returns the falls decided since the last TakeFalls, in the
// order they were decided: every drain emitted, every fall rejected (with
// its reason) and, after Flush, every one still pending.
func (s *Segmenter) TakeFalls() []Fall {
	s.release()
	out := s.falls
	s.falls = nil
	return out
}

// countReject counts a fall rejected for why.
func (s *Segmenter) countReject(why FallOutcome) {
	switch why {
	case FallTooShort:
		s.stats.RejectedShort++
	case FallTooSmall:
		s.stats.RejectedSmall++
	case FallFewSamples:
		s.stats.RejectedFew++
	case FallTransientOnly:
		s.stats.RejectedTransient++
	case FallInflow:
		s.stats.RejectedInflow++
	case FallPending:
		s.stats.Pending++
	}
}

// rejectFall records a fall [k, e] that is not a drain.
func (s *Segmenter) rejectFall(k, e int, dropM float64, why FallOutcome) {
	t0 := s.tAt(k)
	if t0 < s.emitFrom {
		return
	}
	s.countReject(why)
	s.stats.Falls++
	s.falls = append(s.falls, Fall{StartNs: t0, EndNs: s.tAt(e), DropM: dropM, Outcome: why})
}

// Flush processes the samples still held by the spike filter and returns
// the segments released so far. Segments whose end is within Settle of the
// last sample, and whatever is still under way, are not emitted: a later
// scan from CommittedNs emits them (they are counted as pending). The
// Segmenter accepts no more samples.
func (s *Segmenter) Flush() []Segment {
	if !s.finished {
		s.drainHeld()
		s.release()
		for _, g := range s.queue {
			if g.Kind == Drain && g.RawStartNs >= s.emitFrom {
				s.stats.Pending++
				s.stats.Falls++
				s.falls = append(s.falls, Fall{StartNs: g.RawStartNs, EndNs: g.RawEndNs, DropM: g.dropM(), Outcome: FallPending})
			}
		}
		if s.state == stFall && s.iMark > s.knee {
			s.rejectFall(s.knee, s.iMark, s.yAt(s.knee)-s.yAt(s.iMark), FallPending)
		}
	}
	return s.Take()
}

// FlushFinal is Flush for a history that is complete (nothing more will
// come): the fall under way is judged now, as a partial drain when the
// data end before it levels out, and the segments within Settle of the
// last sample are emitted too. The idle stretch under way is not emitted.
// CommittedNs then lies after the last drain, so a later scan over more
// data does not emit it again (a drain cut by the end of the data stays
// partial).
func (s *Segmenter) FlushFinal() []Segment {
	if !s.finished {
		s.drainHeld()
		if last := s.done - 1; last >= 0 {
			switch s.state {
			case stFall:
				s.closeIdle()
				s.finishDrain(s.knee, s.iMark, last)
				s.toQuiet(s.done, last)
			case stRise:
				s.closeIdle()
				s.finishFill(s.knee, s.iMark)
				s.toQuiet(s.done, last)
			}
		}
		s.final = true
	}
	return s.Take()
}

// drainHeld runs the detector on the samples still held by the spike
// filter and marks the Segmenter finished.
func (s *Segmenter) drainHeld() {
	for j := s.done; j < s.n; j++ {
		s.filter(j, s.n-1)
	}
	s.finished = true
}

// dropM is how far a drain's kept readings fell, m.
func (g *Segment) dropM() float64 {
	if len(g.HeadM) == 0 {
		return 0
	}
	return g.HeadM[0] - g.HeadM[len(g.HeadM)-1]
}

func (s *Segmenter) release() {
	k := 0
	for ; k < len(s.queue); k++ {
		g := &s.queue[k]
		if s.n == 0 || (!s.final && g.RawEndNs > s.lastT-s.settleNs) {
			break
		}
		s.lastEmitStart, s.anyEmit = g.RawStartNs, true
		if g.RawStartNs < s.emitFrom {
			s.stats.Dropped++
			continue
		}
		switch g.Kind {
		case Drain:
			s.stats.Drains++
			s.stats.Falls++
			s.falls = append(s.falls, Fall{StartNs: g.RawStartNs, EndNs: g.RawEndNs, DropM: g.dropM(), Outcome: FallDrain})
		case Idle:
			s.stats.Idles++
		case Fill:
			s.stats.Fills++
		}
		s.ready = append(s.ready, *g)
	}
	if k > 0 {
		n := copy(s.queue, s.queue[k:])
		clear(s.queue[n:])
		s.queue = s.queue[:n]
	}
}

// CommittedNs is the time before which everything is decided and emitted.
// A later scan that restarts from CommittedNs minus a lookback (longer than
// the longest drain, and ≥ 8 h when σ is estimated) with EmitFromNs =
// CommittedNs emits each segment exactly once. It lies half way between the
// start of the last emitted segment and the start of the first one still
// pending, so that small shifts of the boundaries between scans cannot move
// a segment across it. It never goes below EmitFromNs.
func (s *Segmenter) CommittedNs() int64 {
	s.release()
	if s.n == 0 {
		if s.opt.EmitFromNs != 0 {
			return s.opt.EmitFromNs
		}
		return math.MinInt64
	}
	pend := s.lastT
	switch s.state {
	case stQuiet:
		if s.idleStart < s.done {
			pend = s.tAt(s.idleStart)
		}
		if s.win.n() > 0 {
			pend = min(pend, s.tAt(s.win.argMax()))
		}
	default:
		pend = s.tAt(s.knee)
		if s.idleKeep >= 0 && s.idleKeep < s.done {
			pend = min(pend, s.tAt(s.idleKeep))
		}
	}
	if len(s.queue) > 0 {
		pend = min(pend, s.queue[0].RawStartNs)
	}
	last := s.firstT
	if s.anyEmit {
		last = s.lastEmitStart
	}
	c := last + (pend-last)/2
	if s.opt.EmitFromNs != 0 && c < s.opt.EmitFromNs {
		c = s.opt.EmitFromNs
	}
	return c
}

// SegmentSeries cuts a whole series in one go; see Segmenter. Segments whose
// end is within Settle of the last sample are not returned (set a negative
// Settle to get them all).
func SegmentSeries(t *Tank, s *Series, opt SegmentOptions) []Segment {
	sg := NewSegmenter(t, opt)
	if s.Tank != "" {
		sg.id = s.Tank
	}
	sg.PushSubmerged(s.TimeNs, s.HeadM, s.InflowM3s, s.SubmergedM)
	return sg.Flush()
}

// compact drops history no longer needed.
func (s *Segmenter) compact() {
	keep := s.done
	switch s.state {
	case stQuiet:
		keep = min(keep, s.idleStart)
		if s.win.n() > 0 {
			keep = min(keep, s.win.argMax(), s.win.argMin())
		}
	default:
		keep = min(keep, s.knee, s.pre)
		if s.idleKeep >= 0 {
			keep = min(keep, s.idleKeep)
		}
	}
	drop := keep - s.base
	if drop < 1024 || drop < len(s.ht)/2 {
		return
	}
	s.ht = s.ht[:copy(s.ht, s.ht[drop:])]
	s.hr = s.hr[:copy(s.hr, s.hr[drop:])]
	s.hy = s.hy[:copy(s.hy, s.hy[drop:])]
	s.hk = s.hk[:copy(s.hk, s.hk[drop:])]
	if s.metered {
		s.hq = s.hq[:copy(s.hq, s.hq[drop:])]
	}
	if s.linked {
		s.hs = s.hs[:copy(s.hs, s.hs[drop:])]
	}
	s.base = keep
}
