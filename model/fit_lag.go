package model

import (
	"math"

	"drainsight/model/lsq"
)

// Transmitter lag.
//
// Most level transmitters smooth their output through a first-order lag
// whose time constant τ is a setting of the instrument ("damping", usually
// 0-60 s), and a stilling well or a long impulse line adds one of its own.
// The reading then obeys τ dy/dt = h - y. Once a drain runs, the lagged
// reading trails the level by about τ, which the fitted F0 absorbs; but a
// drain starts from rest, and for the first few τ the reading bends away
// from the square-root curve: at τ = 60 s that biases K of a partial drain
// by several per cent. When the tank's lag is known (Tank.SensorLagS) the
// fit models the reading instead of the level: the model curve h(t) is put
// through the same lag, settled at h(0) at the first sample (the tank was at
// rest before the valve opened), by the exact recursion for an input linear
// between samples (first-order hold),
//
//	y_i = a y_{i-1} + (1-β) h_i + (β-a) h_{i-1},  a = exp(-Δ/τ),  β = τ(1-a)/Δ,
//
// Δ = t_i - t_{i-1} (Franklin, Powell & Workman, "Digital Control of Dynamic
// Systems", 3rd ed., §6.3: the ramp-invariant discretisation). The filter
// is linear, so the Jacobian is the filtered Jacobian; the datum column,
// a constant, passes unchanged.

// lagSubSteps is how many sub-steps a bending interval is filtered in, and
// lagHoldTolM how far (m) the model's midpoint may lie off the chord of an
// interval before it is: 10 µm, below any transmitter's resolution (a
// cylinder's drain bends by about 2 µm over a 10 s interval; the end of a
// drain at a cone's apex by millimetres).
const (
	lagSubSteps = 16
	lagHoldTolM = 1e-5
)

// lagCoef returns a and β of the first-order-hold lag recursion.
func lagCoef(dt, lagS float64) (a, beta float64) {
	if dt <= 0 {
		return 1, 1
	}
	x := dt / lagS
	a = math.Exp(-x)
	if x < 1e-6 {
		return a, 1 - x/2
	}
	return a, -math.Expm1(-x) / x
}

// lagFilter runs the recursion over one value: prevOut and prevIn are the
// filter's output and input at the previous time, in its input now.
func lagFilter(prevOut, prevIn, in, a, beta float64) float64 {
	return a*prevOut + (1-beta)*in + (beta-a)*prevIn
}

// lagNormal is levelNormal for a reading seen through a first-order lag of
// time constant lagS (s).
func lagNormal(ht *HeadTransform, tt, yy []float64, np int, lagS float64) lsq.NormalFunc {
	return func(p, jtj, jtr []float64) float64 {
		f0, k, d := p[0], p[1], 0.0
		if np == 3 {
			d = p[2]
		}
		var ss, a00, a01, a11, a02, a12, a22, g0, g1, g2 float64
		hint := -1
		// The filter starts settled at τ = 0.
		hPrev, gPrev, _ := ht.invG(f0, -1)
		yF, c0, c1 := hPrev, gPrev, 0.0
		tPrev, m1Prev := 0.0, 0.0
		for i, ti := range tt {
			h, g, hn := ht.invG(f0-k*ti, hint)
			hint = hn
			m1 := -ti * g
			// Where the level bends within the interval (the last
			// interval of a drain running dry, most of all at a cone's
			// apex, where h falls as (T-t)^0.4), a straight line between
			// the samples misplaces the lag's input: the interval is
			// filtered in lagSubSteps sub-steps when the model's midpoint
			// is more than lagHoldTolM off the chord.
			if dt := ti - tPrev; dt > 0 {
				tm := tPrev + dt/2
				if hm, _, _ := ht.invG(f0-k*tm, hint); math.Abs(hm-0.5*(hPrev+h)) > lagHoldTolM {
					a, beta := lagCoef(dt/lagSubSteps, lagS)
					t0 := tPrev
					for j := 1; j < lagSubSteps; j++ {
						tj := t0 + dt*float64(j)/lagSubSteps
						hj, gj, _ := ht.invG(f0-k*tj, hint)
						m1j := -tj * gj
						yF = lagFilter(yF, hPrev, hj, a, beta)
						c0 = lagFilter(c0, gPrev, gj, a, beta)
						c1 = lagFilter(c1, m1Prev, m1j, a, beta)
						hPrev, gPrev, m1Prev, tPrev = hj, gj, m1j, tj
					}
				}
			}
			a, beta := lagCoef(ti-tPrev, lagS)
			yF = lagFilter(yF, hPrev, h, a, beta)
			c0 = lagFilter(c0, gPrev, g, a, beta)
			c1 = lagFilter(c1, m1Prev, m1, a, beta)
			hPrev, gPrev, m1Prev, tPrev = h, g, m1, ti
			r := yy[i] - d - yF
			ss += r * r
			a00 += c0 * c0
			a01 += c0 * c1
			a11 += c1 * c1
			a02 += c0
			a12 += c1
			g0 += c0 * r
			g1 += c1 * r
			g2 += r
		}
		if jtj != nil {
			fillNormal(jtj, jtr, np, len(tt), a00, a01, a11, a02, a12, a22, g0, g1, g2)
		}
		return ss
	}
}
