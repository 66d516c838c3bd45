package sim

import (
	"math"
	"math/rand/v2"
	"time"

	"drainsight/model"
)

// StepKind names one step of an operating sequence.
type StepKind int

// The steps of a Sequence.
const (
	// StepHold keeps the outlet shut and nothing flowing in for Duration.
	StepHold StepKind = iota + 1
	// StepDrain opens the outlet until the head falls to ToHeadM (0 or
	// less: until the tank runs dry), then shuts it.
	StepDrain
	// StepFill pumps in at RateM3s until the head reaches ToHeadM.
	StepFill
	// StepPumpedDrain opens the outlet while a pump feeds RateM3s in,
	// for Duration (or until the head falls to ToHeadM, whichever is first).
	StepPumpedDrain
)

// Step is one step of a Sequence.
type Step struct {
	Kind     StepKind
	Duration time.Duration // StepHold, StepPumpedDrain
	ToHeadM  float64       // StepDrain, StepFill, StepPumpedDrain (head above the outlet, m)
	RateM3s  float64       // StepFill, StepPumpedDrain (inflow, m^3/s)
}

// SequenceSpec is one tank run through an explicit list of steps, for
// tests that need control over every hold and drain (Simulate draws its
// schedule at random). The sensor adds Gaussian noise of NoiseM and rounds
// to QuantumM (0: no rounding). The outlet opens and shuts at once.
type SequenceSpec struct {
	Tank        model.Tank
	KM25s       float64       // outlet constant, m^2.5/s
	SampleEvery time.Duration // sampling interval (default 10 s)
	// PhaseS shifts the sample grid: samples are taken at
	// From + PhaseS + k SampleEvery, so that boundaries fall anywhere
	// between two samples.
	PhaseS     float64
	NoiseM     float64
	QuantumM   float64
	StartHeadM float64 // head at From
	From       time.Time
	Steps      []Step
}

// SimulateSequence runs the steps of spec and returns the reported series
// and one DrainTruth per StepDrain or StepPumpedDrain (valve opening and
// closing times, or the time the tank ran dry, from the integration
// itself). Drains without inflow follow the exact transform of the
// simulator's own geometry tables; fills and pumped drains are integrated
// with RK4 on the volume in steps of at most 1 s.
func SimulateSequence(spec SequenceSpec, rng *rand.Rand) (model.Series, []DrainTruth) {
	g := newGeom(&spec.Tank)
	dt := spec.SampleEvery
	if dt <= 0 {
		dt = 10 * time.Second
	}
	k := spec.KM25s
	// The level history is a list of pieces; each gives the head over
	// [t0, t1) in seconds since From.
	type piece struct {
		t0, t1 float64
		head   func(t float64) float64
	}
	var pieces []piece
	var truth []DrainTruth
	t, h := 0.0, min(max(spec.StartHeadM, 0), g.hMax)
	ns := func(ts float64) int64 { return spec.From.UnixNano() + int64(math.Round(ts*1e9)) }
	for _, st := range spec.Steps {
		switch st.Kind {
		case StepHold:
			d := st.Duration.Seconds()
			hh := h
			pieces = append(pieces, piece{t, t + d, func(float64) float64 { return hh }})
			t += d
		case StepDrain:
			to := max(st.ToHeadM, 0)
			if to >= h {
				continue
			}
			f0, t0 := g.F(h), t
			d := (f0 - g.F(to)) / k
			pieces = append(pieces, piece{t0, t0 + d, func(x float64) float64 { return g.invF(f0 - k*(x-t0)) }})
			truth = append(truth, DrainTruth{StartNs: ns(t0), EndNs: ns(t0 + d), KM25s: k, H0M: h, H1M: to, Complete: to == 0})
			t, h = t0+d, to
		case StepFill, StepPumpedDrain:
			hs, ts, end := g.integrate(h, t, st, k)
			t0 := t
			pieces = append(pieces, piece{t0, end, func(x float64) float64 { return interp(ts, hs, x) }})
			if st.Kind == StepPumpedDrain {
				truth = append(truth, DrainTruth{StartNs: ns(t0), EndNs: ns(end), KM25s: k, H0M: h, H1M: hs[len(hs)-1], InflowM3s: st.RateM3s})
			}
			t, h = end, hs[len(hs)-1]
		}
	}
	s := model.Series{Tank: spec.Tank.ID}
	dtS := dt.Seconds()
	j := 0
	for x := spec.PhaseS; x < t; x += dtS {
		for j < len(pieces)-1 && x >= pieces[j].t1 {
			j++
		}
		hv := h
		if len(pieces) > 0 {
			hv = pieces[j].head(min(x, pieces[j].t1))
		}
		r := hv + spec.NoiseM*rng.NormFloat64()
		if spec.QuantumM > 0 {
			r = math.Round(r/spec.QuantumM) * spec.QuantumM
		}
		s.Append(ns(x), r)
	}
	return s, truth
}

// integrate runs a fill or a pumped drain from head h at time t with RK4 on
// the volume (steps of at most 1 s) and returns the heads at the step
// times and the end time.
func (g *geom) integrate(h, t float64, st Step, k float64) (hs, ts []float64, end float64) {
	q := st.RateM3s
	kOut := 0.0
	limit := math.Inf(1)
	if st.Kind == StepPumpedDrain {
		kOut = k
		limit = t + st.Duration.Seconds()
	}
	to := st.ToHeadM
	dv := func(v float64) float64 { return q - kOut*math.Sqrt(g.head(v)) }
	v := g.vol(h)
	vs := g.vol(max(to, 0))
	hs, ts = []float64{h}, []float64{t}
	for range 10_000_000 {
		step := min(1.0, limit-t)
		if step <= 0 {
			break
		}
		k1 := dv(v)
		k2 := dv(v + 0.5*step*k1)
		k3 := dv(v + 0.5*step*k2)
		k4 := dv(v + step*k3)
		vn := v + step/6*(k1+2*k2+2*k3+k4)
		up := st.Kind == StepFill
		if (up && vn >= vs) || (!up && vn <= vs) {
			// the last step ends where the volume crosses the stop level
			frac := (vs - v) / (vn - v)
			t += frac * step
			hs, ts = append(hs, max(to, 0)), append(ts, t)
			return hs, ts, t
		}
		v, t = vn, t+step
		hs, ts = append(hs, g.head(v)), append(ts, t)
		if up && !(q > 0) {
			break
		}
	}
	return hs, ts, t
}

// interp is the piecewise-linear interpolant of (ts, hs) at x.
func interp(ts, hs []float64, x float64) float64 {
	if x <= ts[0] {
		return hs[0]
	}
	n := len(ts)
	if x >= ts[n-1] {
		return hs[n-1]
	}
	lo, hi := 0, n-1
	for hi-lo > 1 {
		m := (lo + hi) / 2
		if ts[m] <= x {
			lo = m
		} else {
			hi = m
		}
	}
	w := (x - ts[lo]) / (ts[hi] - ts[lo])
	return hs[lo]*(1-w) + hs[hi]*w
}
