package sim

import (
	"fmt"
	"math"
	"math/rand/v2"
	"sort"
	"time"

	"drainsight/model"
)

// FaultKind names a simulated fault.
type FaultKind int

// The faults. Unless stated, a fault acts from Start to End; a zero End
// means "until the end of the simulation". "Gradual" faults ramp linearly
// from nothing at Start to full Magnitude at End and then stay.
const (
	// Fouling: K falls gradually to (1 - Magnitude) K (Magnitude 0.25 = -25 %).
	Fouling FaultKind = iota + 1
	// Blockage: K drops abruptly to (1 - Magnitude) K at Start (restored at End if set).
	Blockage
	// Erosion: K rises gradually to (1 + Magnitude) K.
	Erosion
	// DownstreamLeak: K rises abruptly to (1 + Magnitude) K at Start (until End if set).
	DownstreamLeak
	// TankLeak: an extra outflow K_leak sqrt(h - ElevM) while the level is
	// above the leak opening, also while the outlet is shut; K_leak =
	// Magnitude × KM25s, reached gradually when End > Start, at once (and
	// for good) when End is zero. ElevM is the opening's elevation above the
	// outlet (0: at the outlet, negative: below it, where the tank keeps
	// leaking below the outlet down to the opening or the vessel bottom).
	TankLeak
	// SensorStuck: the reading freezes at its value at Start until End.
	SensorStuck
	// SensorDrift: the reading gains an offset growing at Magnitude m/day
	// from Start; it stops growing at End (and stays).
	SensorDrift
	// SensorSpikes: single-sample spikes at Magnitude per hour, of height
	// about SizeM (default 0.2 m, either sign).
	SensorSpikes
	// SensorNoise: the noise standard deviation is multiplied by Magnitude.
	SensorNoise
	// DataGap: no samples from Start to End.
	DataGap
)

var faultNames = [...]string{"", "fouling", "blockage", "erosion", "downstream_leak", "tank_leak",
	"sensor_stuck", "sensor_drift", "sensor_spikes", "sensor_noise", "data_gap"}

func (k FaultKind) String() string {
	if k > 0 && int(k) < len(faultNames) {
		return faultNames[k]
	}
	return fmt.Sprintf("FaultKind(%d)", int(k))
}

// Fault is one fault on one tank; Magnitude is documented per kind.
type Fault struct {
	Kind       FaultKind
	Start, End time.Time
	Magnitude  float64
	SizeM      float64 // SensorSpikes only: typical spike height, m
	// ElevM (TankLeak only) is the leak opening's elevation above the
	// outlet, m; negative below it.
	ElevM float64
}

// TankSpec describes one simulated tank, its duty and its faults.
type TankSpec struct {
	Tank        model.Tank
	KM25s       float64       // healthy outlet constant, m^2.5/s
	SampleEvery time.Duration // sensor sampling interval
	NoiseM      float64       // sensor noise standard deviation, m
	QuantumM    float64       // sensor resolution, m (0: none)
	// FillToM is the head the tank is filled to before each drain.
	FillToM float64
	// DrainsPerDay sets the operating schedule: drain k is due at
	// (k + 1/2 ± 1/4 random) days/DrainsPerDay; 0 means no drains.
	DrainsPerDay float64
	// FillRateM3s is the fill pump rate (0: fill in one hour).
	FillRateM3s float64
	// PartialDrainShare is the share of drains stopped half way (valve
	// closed at 30-70 % of the starting head).
	PartialDrainShare float64
	// InflowDuringDrainShare is the share of drains during which the feed
	// runs for a while (30-70 % of the starting outflow).
	InflowDuringDrainShare float64
	// MeterInflow records the inflow in Series.InflowM3s.
	MeterInflow bool
	// ValveOpenTime is how long the outlet valve takes to open (K ramps
	// linearly from 0); 0 opens at once.
	ValveOpenTime time.Duration
	Faults        []Fault
}

// DrainTruth is one simulated drain.
type DrainTruth struct {
	StartNs   int64   // valve starts to open
	EndNs     int64   // outflow stops: empty, or valve closed
	KM25s     float64 // outlet K with the valve open, at the start of the drain
	LeakKM25s float64 // shell leak constant at the start of the drain
	H0M, H1M  float64 // true head at start and end
	Complete  bool    // ran down to the outlet
	InflowM3s float64 // feed rate while it ran during the drain, 0 when none
}

// Truth is what really happened, for scoring.
type Truth struct {
	Tank       string
	Drains     []DrainTruth
	Faults     []Fault
	Samples    int // samples reported
	GapSamples int // samples lost to DataGap
	Spikes     int // spikes injected

	spec TankSpec
	from time.Time
	endS float64
}

type window struct{ a, b float64 } // seconds since the simulation start

// span returns the fault's window in seconds since from; a zero End is endS.
func span(f Fault, from time.Time, endS float64) window {
	w := window{f.Start.Sub(from).Seconds(), endS}
	if !f.End.IsZero() {
		w.b = f.End.Sub(from).Seconds()
	}
	return w
}

func ramp(t float64, w window) float64 {
	if t <= w.a {
		return 0
	}
	if t >= w.b || w.b <= w.a {
		return 1
	}
	return (t - w.a) / (w.b - w.a)
}

func (w window) in(t float64) bool { return t >= w.a && t < w.b }

// KAt returns the true outlet K (valve open) at time t.
func (tr *Truth) KAt(t time.Time) float64 {
	return tr.spec.kAt(t.Sub(tr.from).Seconds(), tr.from, tr.endS)
}

// LeakKAt returns the true shell-leak constant at time t.
func (tr *Truth) LeakKAt(t time.Time) float64 {
	return tr.spec.leakAt(t.Sub(tr.from).Seconds(), tr.from, tr.endS)
}

func (s *TankSpec) kAt(ts float64, from time.Time, endS float64) float64 {
	k := s.KM25s
	for _, f := range s.Faults {
		w := span(f, from, endS)
		switch f.Kind {
		case Fouling:
			k *= 1 - f.Magnitude*ramp(ts, w)
		case Erosion:
			k *= 1 + f.Magnitude*ramp(ts, w)
		case Blockage:
			if w.in(ts) {
				k *= 1 - f.Magnitude
			}
		case DownstreamLeak:
			if w.in(ts) {
				k *= 1 + f.Magnitude
			}
		}
	}
	return k
}

func (s *TankSpec) leakAt(ts float64, from time.Time, endS float64) float64 {
	k := 0.0
	for _, f := range s.Faults {
		if f.Kind == TankLeak {
			k += s.leakOne(f, ts, from, endS)
		}
	}
	return k
}

// leakOne is the leak constant of one TankLeak fault at ts.
func (s *TankSpec) leakOne(f Fault, ts float64, from time.Time, endS float64) float64 {
	w := span(f, from, endS)
	if f.End.IsZero() {
		if ts >= w.a {
			return f.Magnitude * s.KM25s
		}
		return 0
	}
	return f.Magnitude * s.KM25s * ramp(ts, w)
}

// elevatedLeak tells whether a leak opening lies off the outlet, so that
// the outflow is no longer one constant times sqrt(h) and the plant is
// integrated by RK4 on the volume throughout.
func (s *TankSpec) elevatedLeak() bool {
	for _, f := range s.Faults {
		if f.Kind == TankLeak && f.ElevM != 0 {
			return true
		}
	}
	return false
}

// leakFlow is the leak outflow at ts and head h, m^3/s: the sum of
// K_leak sqrt(h - ElevM) over the leaks whose opening lies below the level.
func (s *TankSpec) leakFlow(ts, h float64, from time.Time, endS float64) float64 {
	q := 0.0
	for _, f := range s.Faults {
		if f.Kind == TankLeak && h > f.ElevM {
			q += s.leakOne(f, ts, from, endS) * math.Sqrt(h-f.ElevM)
		}
	}
	return q
}

const (
	pIdle = iota
	pFill
	pDrain
	pHold
)

type plant struct {
	spec *TankSpec
	g    *geom
	rng  *rand.Rand
	from time.Time
	endS float64
	brk  []float64 // break points of K(t), s

	t, h  float64
	phase int
	// rk: a leak opening off the outlet; every phase is integrated by RK4
	// on the (signed) volume, and the head may fall below the outlet.
	rk bool

	// drain under way
	dStart   float64
	valveEnd float64
	target   float64
	qIn      float64
	qA, qB   float64
	cur      DrainTruth

	holdEnd   float64
	nextFill  float64
	nextDrain float64
	slot      int
	slotT     float64
	fillRate  float64
	truth     *Truth
}

// Simulate runs one tank from from to to (samples at from + k SampleEvery,
// to excluded) and returns the reported series and the truth. The tank
// starts idle, filled to FillToM.
func Simulate(spec TankSpec, from, to time.Time, rng *rand.Rand) (model.Series, Truth) {
	endS := to.Sub(from).Seconds()
	tr := Truth{Tank: spec.Tank.ID, Faults: append([]Fault(nil), spec.Faults...), spec: spec, from: from, endS: endS}
	p := &plant{spec: &spec, g: newGeom(&spec.Tank), rng: rng, from: from, endS: endS, truth: &tr}
	p.h = min(spec.FillToM, p.g.hMax)
	p.rk = spec.elevatedLeak()
	p.fillRate = spec.FillRateM3s
	if !(p.fillRate > 0) {
		p.fillRate = p.g.vol(spec.FillToM) / 3600
	}
	for _, f := range spec.Faults {
		w := span(f, from, endS)
		p.brk = append(p.brk, w.a, w.b)
	}
	sort.Float64s(p.brk)
	p.nextFill, p.nextDrain = math.Inf(1), math.Inf(1)
	p.slot = -1
	if spec.DrainsPerDay > 0 {
		p.planDrain()
		p.nextDrain = p.slotT
	}

	// sensor state
	var drift, spikes, noise, stuck, gaps []window
	var driftRate, spikeRate, spikeSize, noiseMul []float64
	for _, f := range spec.Faults {
		w := span(f, from, endS)
		switch f.Kind {
		case SensorDrift:
			drift, driftRate = append(drift, w), append(driftRate, f.Magnitude)
		case SensorSpikes:
			sz := f.SizeM
			if !(sz > 0) {
				sz = 0.2
			}
			spikes, spikeRate, spikeSize = append(spikes, w), append(spikeRate, f.Magnitude), append(spikeSize, sz)
		case SensorNoise:
			noise, noiseMul = append(noise, w), append(noiseMul, f.Magnitude)
		case SensorStuck:
			stuck = append(stuck, w)
		case DataGap:
			gaps = append(gaps, w)
		}
	}
	dt := spec.SampleEvery
	if dt <= 0 {
		dt = 10 * time.Second
	}
	dtS := dt.Seconds()
	n := int(to.Sub(from) / dt)
	s := model.Series{Tank: spec.Tank.ID}
	s.TimeNs = make([]int64, 0, n)
	s.HeadM = make([]float64, 0, n)
	if spec.MeterInflow {
		s.InflowM3s = make([]float64, 0, n)
	}
	stuckVal := make([]float64, len(stuck))
	stuckSet := make([]bool, len(stuck))
	for k := range n {
		ts := float64(k) * dtS
		p.advance(ts)
		q := p.inflowAt(ts)
		sigma := spec.NoiseM
		for i, w := range noise {
			if w.in(ts) {
				sigma *= noiseMul[i]
			}
		}
		r := p.h + sigma*rng.NormFloat64()
		for i, w := range drift {
			r += driftRate[i] * (min(ts, w.b) - w.a) / 86400 * b2f(ts >= w.a)
		}
		for i, w := range spikes {
			if w.in(ts) && rng.Float64() < spikeRate[i]*dtS/3600 {
				sign := 1.0
				if rng.IntN(2) == 0 {
					sign = -1
				}
				r += sign * spikeSize[i] * (0.5 + rng.Float64())
				tr.Spikes++
			}
		}
		if spec.QuantumM > 0 {
			r = math.Round(r/spec.QuantumM) * spec.QuantumM
		}
		for i, w := range stuck {
			if w.in(ts) {
				if !stuckSet[i] {
					stuckVal[i], stuckSet[i] = r, true
				}
				r = stuckVal[i]
			}
		}
		lost := false
		for _, w := range gaps {
			lost = lost || w.in(ts)
		}
		if lost {
			tr.GapSamples++
			continue
		}
		s.Append(from.Add(time.Duration(k)*dt).UnixNano(), r)
		if spec.MeterInflow {
			s.InflowM3s = append(s.InflowM3s, q)
		}
	}
	tr.Samples = s.Len()
	return s, tr
}

func b2f(b bool) float64 {
	if b {
		return 1
	}
	return 0
}

func (p *plant) unif(a, b float64) float64 { return a + (b-a)*p.rng.Float64() }

// planDrain picks the next drain slot at least 30 min ahead.
func (p *plant) planDrain() {
	if !(p.spec.DrainsPerDay > 0) {
		return
	}
	per := 86400 / p.spec.DrainsPerDay
	for {
		p.slot++
		p.slotT = (float64(p.slot) + 0.5 + p.unif(-0.25, 0.25)) * per
		if p.slotT > p.t+1800 {
			break
		}
	}
}

// afterDrain schedules the fill for the next drain.
func (p *plant) afterDrain() {
	p.phase = pIdle
	p.nextDrain = math.Inf(1)
	if !(p.spec.DrainsPerDay > 0) {
		p.nextFill = math.Inf(1)
		return
	}
	p.planDrain()
	dur := max(p.vol(p.spec.FillToM)-p.vol(p.h), 0) / p.fillRate
	p.nextFill = max(p.t+p.unif(300, 1800), p.slotT-dur-p.unif(1800, 7200))
}

func (p *plant) kValve(t float64) float64 {
	k := p.spec.kAt(t, p.from, p.endS)
	if t < p.valveEnd {
		k *= max(t-p.dStart, 0) / (p.valveEnd - p.dStart)
	}
	return k
}

func (p *plant) kTot(t float64) float64 {
	k := p.spec.leakAt(t, p.from, p.endS)
	if p.phase == pDrain || p.phase == pHold {
		k += p.kValve(t)
	}
	return k
}

func (p *plant) inflowAt(t float64) float64 {
	switch p.phase {
	case pFill:
		return p.fillRate
	case pDrain:
		if t >= p.qA && t < p.qB {
			return p.qIn
		}
	}
	return 0
}

// advance runs the plant to time ts.
func (p *plant) advance(ts float64) {
	for guard := 0; p.t < ts && guard < 1e6; guard++ {
		switch p.phase {
		case pIdle:
			ev := min(p.nextFill, p.nextDrain)
			e := min(ev, ts)
			p.runShut(e)
			if e == ev {
				if p.nextDrain <= p.nextFill {
					p.startDrain()
				} else {
					p.phase = pFill
					p.nextFill = math.Inf(1)
				}
			}
		case pFill:
			if p.runRK(ts, p.spec.FillToM, false) {
				p.phase = pIdle
				p.nextDrain = max(p.slotT, p.t+p.unif(600, 1800))
			}
		case pDrain:
			e := ts
			inflow := false
			switch {
			case p.t < p.qA:
				e = min(e, p.qA)
			case p.t < p.qB:
				e = min(e, p.qB)
				inflow = true
			}
			var stop bool
			if inflow || p.rk {
				stop = p.runRK(e, p.target, true)
			} else {
				stop = p.runF(e, p.target)
			}
			if stop {
				p.endDrain()
			}
		case pHold:
			e := min(p.holdEnd, ts)
			p.runShut(e)
			if e == p.holdEnd {
				p.afterDrain()
			}
		}
	}
}

func (p *plant) startDrain() {
	p.phase = pDrain
	p.nextDrain = math.Inf(1)
	t := p.t
	p.cur = DrainTruth{StartNs: p.from.UnixNano() + int64(math.Round(t*1e9)), H0M: p.h,
		KM25s: p.spec.kAt(t, p.from, p.endS), LeakKM25s: p.spec.leakAt(t, p.from, p.endS)}
	p.dStart = t
	p.valveEnd = t + p.spec.ValveOpenTime.Seconds()
	p.target = 0
	if p.rng.Float64() < p.spec.PartialDrainShare {
		p.target = p.h * p.unif(0.3, 0.7)
	}
	p.qA, p.qB, p.qIn = math.Inf(1), math.Inf(1), 0
	if p.rng.Float64() < p.spec.InflowDuringDrainShare {
		k := p.cur.KM25s
		tEst := p.g.F(p.h) / k
		p.qIn = p.unif(0.3, 0.7) * k * math.Sqrt(p.h)
		p.qA = t + p.unif(0, 0.3)*tEst
		p.qB = t + p.unif(0.5, 0.9)*tEst
		p.cur.InflowM3s = p.qIn
	}
	p.brk = insertSorted(p.brk, p.valveEnd)
}

func insertSorted(x []float64, v float64) []float64 {
	i := sort.SearchFloat64s(x, v)
	x = append(x, 0)
	copy(x[i+1:], x[i:])
	x[i] = v
	return x
}

func (p *plant) endDrain() {
	p.cur.EndNs = p.from.UnixNano() + int64(math.Round(p.t*1e9))
	p.cur.H1M = p.h
	p.cur.Complete = p.target == 0
	p.truth.Drains = append(p.truth.Drains, p.cur)
	if p.cur.Complete {
		p.phase = pHold
		p.holdEnd = p.t + p.unif(300, 1200)
		return
	}
	p.afterDrain()
}

// segments yields the sub-intervals of [a, b] between break points.
func (p *plant) cuts(a, b float64, maxLen float64, fn func(a, b float64) bool) bool {
	i := sort.SearchFloat64s(p.brk, a)
	for a < b {
		e := b
		for i < len(p.brk) && p.brk[i] <= a {
			i++
		}
		if i < len(p.brk) && p.brk[i] < e {
			e = p.brk[i]
		}
		if e-a > maxLen {
			e = a + maxLen
		}
		if fn(a, e) {
			return true
		}
		a = e
	}
	return false
}

// simpson is ∫_a^b kTot dt.
func (p *plant) simpson(a, b float64) float64 {
	return (b - a) / 6 * (p.kTot(a) + 4*p.kTot(0.5*(a+b)) + p.kTot(b))
}

// runF advances to tEnd without inflow by the exact transform; it stops
// early, exactly at head stop, if the head falls to it (stop < 0: never).
func (p *plant) runF(tEnd, stop float64) bool {
	if tEnd <= p.t {
		return false
	}
	f0 := p.g.F(p.h)
	fs := -1.0
	if stop >= 0 {
		fs = p.g.F(stop)
	}
	acc := 0.0
	stopped := p.cuts(p.t, tEnd, 600, func(a, b float64) bool {
		d := p.simpson(a, b)
		if fs >= 0 && f0-acc-d <= fs {
			lo, hi := a, b
			for range 100 {
				m := 0.5 * (lo + hi)
				if f0-acc-p.simpson(a, m) <= fs {
					hi = m
				} else {
					lo = m
				}
				if hi-lo < 1e-9 {
					break
				}
			}
			p.t, p.h = hi, stop
			return true
		}
		acc += d
		return false
	})
	if stopped {
		return true
	}
	p.t = tEnd
	if acc != 0 {
		p.h = p.g.invF(f0 - acc)
	}
	return false
}

// runShut advances to tEnd with the outlet shut and nothing flowing in (or
// the valve open and the tank empty): by the exact transform, or by RK4 in
// steps of at most 30 s when a leak opening lies off the outlet (a leak
// drains a tank over hours, so the steps are short beside it).
func (p *plant) runShut(tEnd float64) {
	if !p.rk {
		p.runF(tEnd, -1)
		return
	}
	p.runRKStep(tEnd, math.NaN(), true, 30)
}

// runRK advances to tEnd with inflow by RK4 on the volume; it stops early,
// exactly at head stop, when the head crosses it (down or up).
func (p *plant) runRK(tEnd, stop float64, down bool) bool {
	return p.runRKStep(tEnd, stop, down, 1)
}

// runRKStep is runRK with steps of at most maxStep seconds; a NaN stop
// never stops. With a leak opening off the outlet the volume is signed and
// the head may fall below the outlet.
func (p *plant) runRKStep(tEnd, stop float64, down bool, maxStep float64) bool {
	if tEnd <= p.t {
		return false
	}
	v := p.vol(p.h)
	vs := p.vol(stop)
	crossed := func(x float64) bool {
		if math.IsNaN(vs) {
			return false
		}
		if down {
			return x <= vs
		}
		return x >= vs
	}
	if crossed(v) {
		p.h = stop
		return true
	}
	stopped := p.cuts(p.t, tEnd, maxStep, func(a, b float64) bool {
		vn := p.rk4(a, v, b-a)
		if crossed(vn) {
			lo, hi := 0.0, b-a
			for range 60 {
				m := 0.5 * (lo + hi)
				if crossed(p.rk4(a, v, m)) {
					hi = m
				} else {
					lo = m
				}
			}
			p.t, p.h = a+hi, stop
			return true
		}
		v = vn
		return false
	})
	if stopped {
		return true
	}
	p.t = tEnd
	p.h = p.head(v)
	return false
}

// vol and head are the geometry's, signed below the outlet when a leak
// opening lies off it.
func (p *plant) vol(h float64) float64 {
	if p.rk {
		return p.g.volSigned(h)
	}
	return p.g.vol(h)
}

func (p *plant) head(v float64) float64 {
	if p.rk {
		return p.g.headSigned(v)
	}
	return p.g.head(v)
}

func (p *plant) dvdt(t, v float64) float64 {
	if !p.rk {
		return p.inflowAt(t) - p.kTot(t)*math.Sqrt(p.g.head(v))
	}
	h := p.head(v)
	q := p.inflowAt(t) - p.spec.leakFlow(t, h, p.from, p.endS)
	if (p.phase == pDrain || p.phase == pHold) && h > 0 {
		q -= p.kValve(t) * math.Sqrt(h)
	}
	return q
}

func (p *plant) rk4(t, v, dt float64) float64 {
	k1 := p.dvdt(t, v)
	k2 := p.dvdt(t+dt/2, v+dt/2*k1)
	k3 := p.dvdt(t+dt/2, v+dt/2*k2)
	k4 := p.dvdt(t+dt, v+dt*k3)
	return v + dt/6*(k1+2*k2+2*k3+k4)
}
