package model

import (
	"errors"
	"fmt"
	"math"
)

// FitIdle summarises an idle period (outlet shut, no inflow), where the level
// should stay flat.
//
// Rate: ordinary least squares of the reading y_i on time, slope RateMs
// (m/s) with the classical SE sqrt(s^2/Σ(t-t̄)^2), after dropping readings
// more than 5 robust σ from a first line (σ = 1.4826 MAD of its residuals).
// NoiseM is that robust σ. MeanHeadM is the mean kept reading.
//
// Leak: a fall driven by the head through a hole or a passing valve obeys
// A(h) dh/dt = -K_leak sqrt(h), i.e. F(h(t)) = F(h0) - K_leak t with the
// head transform F. The weighted line of F(y_i) on t with w = h/A(h)^2 (the
// delta-method weights of FitDrain's stage 1) gives K_leak = -slope and its
// SE. It is NaN when a kept reading is at or below the outlet (no head to
// drive a leak) or the tank is invalid; a rising level gives K_leak < 0.
//
// FlatRun is the longest run of bit-identical consecutive readings, a sign
// of a stuck sensor when long. Spikes and GapCount are copied from the
// segment.
func FitIdle(t *Tank, seg *Segment) (IdleFit, error) {
	if seg == nil {
		return IdleFit{}, errors.New("model: idle fit: nil segment")
	}
	n := len(seg.TimeNs)
	if len(seg.HeadM) != n {
		return IdleFit{}, fmt.Errorf("model: idle fit: tank %q: %d times but %d heads", seg.Tank, n, len(seg.HeadM))
	}
	if n < 3 {
		return IdleFit{}, fmt.Errorf("model: idle fit: tank %q: %d samples, need at least 3", seg.Tank, n)
	}
	f := IdleFit{
		Tank: seg.Tank, StartNs: seg.TimeNs[0], EndNs: seg.TimeNs[n-1],
		Spikes: seg.Spikes, GapCount: seg.GapCount,
		LeakKM25s: math.NaN(), LeakKSEM25s: math.NaN(),
	}
	sc := scratchPool.Get().(*fitScratch)
	defer scratchPool.Put(sc)
	sc.grow(n)
	tau, w0, w, scratch, out, y := sc.tau, sc.w0, sc.w, sc.s, sc.out, sc.z
	for i, tn := range seg.TimeNs {
		tau[i] = float64(tn-seg.TimeNs[0]) * 1e-9
		v := seg.HeadM[i]
		w0[i], y[i] = 0, 0
		if !math.IsNaN(v) && !math.IsInf(v, 0) {
			w0[i], y[i] = 1, v
		}
	}
	// Longest run of identical readings.
	run := 1
	f.FlatRun = 1
	for i := 1; i < n; i++ {
		if math.Float64bits(seg.HeadM[i]) == math.Float64bits(seg.HeadM[i-1]) {
			run++
			f.FlatRun = max(f.FlatRun, run)
		} else {
			run = 1
		}
	}
	// A plain line, a robust scale, then the line over readings within 5σ.
	lf := robustLineFit(tau, y, w0, w, scratch, out, false, 1.345, 5, 0)
	if lf.n < 3 || !(lf.sxx > 0) {
		return IdleFit{}, fmt.Errorf("model: idle fit: tank %q: %d usable samples, need at least 3 at distinct times", seg.Tank, lf.n)
	}
	f.N = lf.n
	f.NoiseM = lf.sigma
	f.RateMs = lf.b
	f.RateSEMs = math.Sqrt(lf.ss / float64(lf.n-2) / lf.sxx)
	var sum float64
	for i, wi := range w {
		if wi > 0 {
			sum += y[i]
		}
	}
	f.MeanHeadM = sum / float64(lf.n)
	// Leak constant on the transformed scale.
	ht, err := TransformFor(t)
	if err != nil {
		return f, nil
	}
	z := scratch
	for i, wi := range w {
		z[i] = 0
		if !(wi > 0) {
			w0[i] = 0
			continue
		}
		if !(y[i] > 0) {
			return f, nil
		}
		fz, g := ht.fg(y[i])
		z[i], w0[i] = fz, g*g
	}
	lk := fitLine(tau, z, w0)
	if lk.n >= 3 && lk.sxx > 0 {
		var ss float64
		for i, wi := range w0 {
			if wi > 0 {
				e := z[i] - lk.a - lk.b*tau[i]
				ss += wi * e * e
			}
		}
		f.LeakKM25s = -lk.b
		f.LeakKSEM25s = math.Sqrt(ss / float64(lk.n-2) / lk.sxx)
	}
	return f, nil
}
