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
	ts, ys := seg.TimeNs, seg.HeadM
	t0 := ts[0]
	keep, z, gw := sc.out, sc.z, sc.w0
	// The passes below read the segment directly (τ_i is recomputed, never
	// stored) and do the arithmetic of robustLineFit with unit weights and
	// no reweighting in the same order, so the results are the same.
	//
	// Pass 1: longest flat run, finite readings, sums of the first line.
	run := 1
	f.FlatRun = 1
	var sw, swx, swz float64
	nv := 0
	for i, v := range ys {
		keep[i] = !math.IsNaN(v) && !math.IsInf(v, 0)
		if i > 0 {
			if math.Float64bits(v) == math.Float64bits(ys[i-1]) {
				run++
				f.FlatRun = max(f.FlatRun, run)
			} else {
				run = 1
			}
		}
		if keep[i] {
			sw++
			swx += float64(ts[i]-t0) * 1e-9
			swz += v
			nv++
		}
	}
	if nv < 3 {
		return IdleFit{}, fmt.Errorf("model: idle fit: tank %q: %d usable samples, need at least 3 at distinct times", seg.Tank, nv)
	}
	lf := idleLine(ts, ys, keep, sw, swx, swz, nv)
	// Robust scale of the residuals, then the outliers beyond 5σ.
	abs := sc.s[:0]
	for i, v := range ys {
		if keep[i] {
			abs = append(abs, math.Abs(v-lf.a-lf.b*(float64(ts[i]-t0)*1e-9)))
		}
	}
	// the median works on a copy (tau and w are free here), so that abs
	// serves the outlier test below
	sel := sc.tau[:len(abs)]
	copy(sel, abs)
	sigma := madScale * medianBuf(sel, sc.w)
	// A leak lowers the level along a curve (h is quadratic in t for a
	// Torricelli leak from a prismatic tank), and over a long idle period
	// the curve's bow inflates the scatter about a line: the scatter about
	// a quadratic stands in when it is much smaller. On a level or straight
	// idle period the two agree to a few per cent and the line's stays.
	// Only a period whose line moves by many noise widths can bow.
	if durS := float64(ts[n-1]-t0) * 1e-9; math.Abs(lf.b)*durS > 10*sigma {
		if sq := idleQuadScale(ts, ys, keep, sc.tau, sc.w); sq > 0 && sq < idleBowShare*sigma {
			sigma = sq
		}
	}
	if !(sigma > 0) {
		var ss float64
		for i, v := range ys {
			if keep[i] {
				e := v - lf.a - lf.b*(float64(ts[i]-t0)*1e-9)
				ss += e * e
			}
		}
		sigma = math.Sqrt(ss / float64(lf.n))
	}
	lim := 5 * sigma
	nOut := 0
	if sigma > 0 {
		ia := 0 // abs holds the kept samples' residuals in order
		for i := range ys {
			if keep[i] {
				if abs[ia] > lim {
					keep[i] = false
					nOut++
				}
				ia++
			}
		}
	}
	if nOut > 0 {
		sw, swx, swz, nv = 0, 0, 0, 0
		for i, v := range ys {
			if keep[i] {
				sw++
				swx += float64(ts[i]-t0) * 1e-9
				swz += v
				nv++
			}
		}
		lf = idleLine(ts, ys, keep, sw, swx, swz, nv)
	}
	if lf.n < 3 || !(lf.sxx > 0) {
		return IdleFit{}, fmt.Errorf("model: idle fit: tank %q: %d usable samples, need at least 3 at distinct times", seg.Tank, lf.n)
	}
	var ss, sum float64
	for i, v := range ys {
		if keep[i] {
			e := v - lf.a - lf.b*(float64(ts[i]-t0)*1e-9)
			ss += e * e
			sum += v
		}
	}
	f.N = lf.n
	f.NoiseM = sigma
	f.RateMs = lf.b
	f.RateSEMs = math.Sqrt(ss / float64(lf.n-2) / lf.sxx)
	f.MeanHeadM = sum / float64(lf.n)
	// Leak constant on the transformed scale.
	ht, err := TransformFor(t)
	if err != nil {
		return f, nil
	}
	sw, swx, swz, nv = 0, 0, 0, 0
	for i, v := range ys {
		z[i], gw[i] = 0, 0
		if !keep[i] {
			continue
		}
		if !(v > 0) {
			return f, nil
		}
		fz, g := ht.fg(v)
		if wi := g * g; wi > 0 {
			z[i], gw[i] = fz, wi
			sw += wi
			swx += wi * (float64(ts[i]-t0) * 1e-9)
			swz += wi * fz
			nv++
		}
	}
	if nv < 2 || !(sw > 0) {
		return f, nil
	}
	xb, zb := swx/sw, swz/sw
	var sxx, sxz float64
	for i, wi := range gw {
		if wi > 0 {
			dx := float64(ts[i]-t0)*1e-9 - xb
			sxx += wi * dx * dx
			sxz += wi * dx * (z[i] - zb)
		}
	}
	b := sxz / sxx
	a := zb - b*xb
	if nv >= 3 && sxx > 0 {
		var ss float64
		for i, wi := range gw {
			if wi > 0 {
				e := z[i] - a - b*(float64(ts[i]-t0)*1e-9)
				ss += wi * e * e
			}
		}
		f.LeakKM25s = -b
		f.LeakKSEM25s = math.Sqrt(ss / float64(nv-2) / sxx)
	}
	return f, nil
}

// idleLine finishes the unit-weight line over the kept readings from its
// sums (sw = count, swx = Σ τ, swz = Σ y), with the centred second pass of
// fitLine.
func idleLine(ts []int64, ys []float64, keep []bool, sw, swx, swz float64, n int) lineFit {
	lf := lineFit{sumW: sw, n: n}
	if n < 2 {
		lf.a, lf.b = math.NaN(), math.NaN()
		return lf
	}
	t0 := ts[0]
	xb, zb := swx/sw, swz/sw
	var sxx, sxz float64
	for i, v := range ys {
		if keep[i] {
			dx := float64(ts[i]-t0)*1e-9 - xb
			sxx += dx * dx
			sxz += dx * (v - zb)
		}
	}
	lf.xbar, lf.sxx = xb, sxx
	lf.b = sxz / sxx
	lf.a = zb - lf.b*xb
	return lf
}

// idleBowShare is how much smaller the scatter about a quadratic must be
// than the scatter about a line before FitIdle takes it as the noise: under
// white noise the two MAD scales differ by a few per cent (a quadratic
// takes one more degree of freedom), so 0.8 is not reached by chance on
// periods of idleBowMinN readings or more (TestIdleQuadScaleAgreesOnWhiteNoise:
// smallest ratio over 200 seeds 0.93 at 300 readings, 0.99 at 4000).
const idleBowShare = 0.8

// idleBowMinN is the fewest readings the quadratic scale is taken from.
const idleBowMinN = 300

// idleQuadScale is the MAD scale of the kept readings about their least
// squares quadratic in time (time centred and scaled for conditioning);
// res and buf are scratch of at least len(ys). 0 when the quadratic cannot
// be fitted or fewer than idleBowMinN readings are kept.
func idleQuadScale(ts []int64, ys []float64, keep []bool, res, buf []float64) float64 {
	n := 0
	var tm float64
	for i := range ys {
		if keep[i] {
			tm += float64(ts[i]-ts[0]) * 1e-9
			n++
		}
	}
	if n < idleBowMinN {
		return 0
	}
	tm /= float64(n)
	span := float64(ts[len(ts)-1]-ts[0]) * 1e-9 / 2
	if !(span > 0) {
		return 0
	}
	x := func(i int) float64 { return (float64(ts[i]-ts[0])*1e-9 - tm) / span }
	var m [3][4]float64 // normal equations, augmented
	for i, v := range ys {
		if !keep[i] {
			continue
		}
		u := x(i)
		p := [3]float64{1, u, u * u}
		for r := range 3 {
			for c := range 3 {
				m[r][c] += p[r] * p[c]
			}
			m[r][3] += p[r] * v
		}
	}
	// Gauss-Jordan with partial pivoting
	for c := range 3 {
		piv := c
		for r := c + 1; r < 3; r++ {
			if math.Abs(m[r][c]) > math.Abs(m[piv][c]) {
				piv = r
			}
		}
		m[c], m[piv] = m[piv], m[c]
		if !(math.Abs(m[c][c]) > 1e-12*float64(n)) {
			return 0
		}
		for r := range 3 {
			if r != c {
				f := m[r][c] / m[c][c]
				for k := c; k < 4; k++ {
					m[r][k] -= f * m[c][k]
				}
			}
		}
	}
	a, b, q := m[0][3]/m[0][0], m[1][3]/m[1][1], m[2][3]/m[2][2]
	res = res[:0]
	for i, v := range ys {
		if keep[i] {
			u := x(i)
			res = append(res, math.Abs(v-a-b*u-q*u*u))
		}
	}
	return madScale * medianBuf(res, buf)
}
