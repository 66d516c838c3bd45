package model

import (
	"math"
	"math/rand/v2"
	"time"
)

// synth builds a level history of a unit-area vertical cylinder from phases
// with closed-form heads: Torricelli's law for a constant area gives
// sqrt(h(t)) = sqrt(h0) - K t / (2 A).
type synth struct {
	aM2   float64
	kM25s float64
	t     float64 // s since t0
	h     float64
	ph    []phase
	truth []trueDrain
}

type phase struct {
	t0, t1 float64
	f      func(t float64) float64 // head at t (s since t0 of the series)
	q      float64                 // inflow m^3/s during the phase
}

type trueDrain struct {
	start, end float64 // s
	h0, h1     float64
	complete   bool
	inflow     bool
}

var synthT0 = time.Date(2031, 3, 2, 0, 0, 0, 0, time.UTC).UnixNano()

func newSynth(h0 float64) *synth {
	// A = 1 m^2; a = 1e-3 m^2, Cd = 0.6 → K = Cd a sqrt(2g).
	return &synth{aM2: 1, kM25s: 0.6e-3 * Sqrt2g, h: h0}
}

func (b *synth) idle(d float64) {
	h := b.h
	b.ph = append(b.ph, phase{b.t, b.t + d, func(float64) float64 { return h }, 0})
	b.t += d
}

// drainTo drains from the current head to hEnd (0: to the outlet).
func (b *synth) drainTo(hEnd float64) {
	c := b.kM25s / (2 * b.aM2)
	r0 := math.Sqrt(b.h)
	t0 := b.t
	d := (r0 - math.Sqrt(hEnd)) / c
	b.ph = append(b.ph, phase{t0, t0 + d, func(t float64) float64 {
		r := r0 - c*(t-t0)
		if r < 0 {
			r = 0
		}
		return r * r
	}, 0})
	b.truth = append(b.truth, trueDrain{t0, t0 + d, b.h, hEnd, hEnd == 0, false})
	b.t += d
	b.h = hEnd
}

// drainInflow drains with a constant inflow q for d seconds (RK4, 0.05 s).
func (b *synth) drainInflow(q, d float64) {
	const dt = 0.05
	n := int(d / dt)
	hs := make([]float64, n+1)
	hs[0] = b.h
	f := func(h float64) float64 { return (q - b.kM25s*math.Sqrt(max(h, 0))) / b.aM2 }
	for i := 0; i < n; i++ {
		h := hs[i]
		k1 := f(h)
		k2 := f(h + 0.5*dt*k1)
		k3 := f(h + 0.5*dt*k2)
		k4 := f(h + dt*k3)
		hs[i+1] = h + dt/6*(k1+2*k2+2*k3+k4)
	}
	t0 := b.t
	b.ph = append(b.ph, phase{t0, t0 + d, func(t float64) float64 {
		x := (t - t0) / dt
		i := min(int(x), n-1)
		w := x - float64(i)
		return hs[i]*(1-w) + hs[i+1]*w
	}, q})
	b.truth = append(b.truth, trueDrain{t0, t0 + d, b.h, hs[n], false, true})
	b.t += d
	b.h = hs[n]
}

func (b *synth) fill(to, q float64) {
	h0, t0 := b.h, b.t
	d := (to - h0) * b.aM2 / q
	b.ph = append(b.ph, phase{t0, t0 + d, func(t float64) float64 { return h0 + q*(t-t0)/b.aM2 }, q})
	b.t += d
	b.h = to
}

// sample returns the series at step dt with Gaussian noise σ.
func (b *synth) sample(dt, sigma float64, rng *rand.Rand) *Series {
	s := &Series{Tank: "T1"}
	k := 0
	for t := 0.0; t < b.t; t += dt {
		for k < len(b.ph)-1 && t >= b.ph[k].t1 {
			k++
		}
		h := b.ph[k].f(t) + sigma*rng.NormFloat64()
		s.Append(synthT0+int64(math.Round(t*1e9)), h)
	}
	return s
}

// inflow returns the metered inflow at the series' times.
func (b *synth) inflow(s *Series) []float64 {
	q := make([]float64, s.Len())
	k := 0
	for i, tn := range s.TimeNs {
		t := float64(tn-synthT0) * 1e-9
		for k < len(b.ph)-1 && t >= b.ph[k].t1 {
			k++
		}
		q[i] = b.ph[k].q
	}
	return q
}

func synthTank() *Tank {
	return &Tank{ID: "T1", Shape: VerticalCylinder{DiameterM: math.Sqrt(4 / math.Pi), InternalHeightM: 3}, DatumKnown: true}
}

// standardDay: idle, complete drain, empty plateau, fill, idle, partial
// drain to 0.8 m, idle, drain to empty, fill, idle. Returns the builder.
func standardDay() *synth {
	b := newSynth(2)
	b.idle(2 * 3600)
	b.drainTo(0)
	b.idle(1800)
	b.fill(2, 2e-3)
	b.idle(3 * 3600)
	b.drainTo(0.8)
	b.idle(3 * 3600)
	b.drainTo(0)
	b.idle(1200)
	b.fill(1.6, 1e-3)
	b.idle(2 * 3600)
	return b
}

// leakIdle is an idle period with the level falling at rateMs (a shell leak).
func (b *synth) leakIdle(d, rateMs float64) {
	h0, t0 := b.h, b.t
	b.ph = append(b.ph, phase{t0, t0 + d, func(t float64) float64 { return h0 - rateMs*(t-t0) }, 0})
	b.t += d
	b.h = h0 - rateMs*d
}
