package model

import (
	"fmt"
	"math"

	"drainsight/model/lsq"
)

// fitInflow fits the volume balance of a drain with metered inflow:
//
//	Y_i = V(h_i) - ∫_0^τi q_in dt = c - K X_i,   X_i = ∫_0^τi sqrt(h) dt,
//
// both integrals by trapezoids on the samples, h_i = y_i - d0 clamped at 0
// inside the square root. The reading noise σ becomes A(h_i) σ in Y_i, so
// the weights are 1/A(h_i)^2 and sqrt(w) × residual is a level residual.
// The exponent comes from adding X2_i = ∫ sqrt(h) ln h dt:
// ∫ h^n dt ≈ X + (n - 1/2) X2, so Y = c + b1 X + b2 X2 gives n = 1/2 + b2/b1
// (delta-method SE). H0M and H1M are the first and last kept readings
// minus d0.
func fitInflow(fit *Fit, t *Tank, ht *HeadTransform, seg *Segment, sc *fitScratch, d0 float64, o FitOptions) error {
	n := len(seg.HeadM)
	tau := sc.tau
	x, y, w0 := sc.z, sc.s, sc.w0
	x2 := make([]float64, n)
	nonFinite := 0
	var cumQ, cumX, cumX2 float64
	var prevQ, prevS, prevSL float64
	prevOK := false
	for i, hm := range seg.HeadM {
		q := seg.InflowM3s[i]
		if math.IsNaN(hm) || math.IsInf(hm, 0) || math.IsNaN(q) || math.IsInf(q, 0) {
			w0[i] = 0
			nonFinite++
			continue
		}
		h := hm - d0
		s := math.Sqrt(math.Max(h, 0))
		sl := 0.0
		if h > 0 {
			sl = s * math.Log(h)
		}
		if prevOK {
			dt := tau[i] - tau[i-1]
			cumQ += 0.5 * dt * (q + prevQ)
			cumX += 0.5 * dt * (s + prevS)
			cumX2 += 0.5 * dt * (sl + prevSL)
		}
		prevQ, prevS, prevSL, prevOK = q, s, sl, true
		x[i], x2[i] = cumX, cumX2
		y[i] = t.Shape.VolumeM3(math.Max(h, 0)+t.OutletElevM) - cumQ
		a := ht.AreaM2(math.Max(h, 0))
		if h > 0 && a > 0 {
			w0[i] = 1 / (a * a)
		} else {
			w0[i] = 0
		}
	}
	scratch := make([]float64, n)
	lf := robustLineFit(x, y, w0, sc.w, scratch, sc.out, o.Tukey, o.TuningC, o.OutlierZ, o.IRLSIterations)
	df := lf.n - 2
	if df <= 0 || !(lf.sxx > 0) {
		return fmt.Errorf("%d usable samples for the volume balance, need at least 3", lf.n)
	}
	if !(lf.b < 0) {
		return fmt.Errorf("the volume balance shows no outflow (slope %g m^2.5/s)", lf.b)
	}
	outliers := nonFinite
	for i := range n {
		if sc.out[i] {
			outliers++
		}
	}
	s2 := lf.ss / float64(df)
	fit.Method = "inflow"
	fit.N = lf.n
	fit.Outliers = outliers
	fit.KM25s = -lf.b
	fit.KSEM25s = math.Sqrt(s2 / lf.sxx)
	tq := tQuantile975(df)
	fit.KLo95M25s, fit.KHi95M25s = fit.KM25s-tq*fit.KSEM25s, fit.KM25s+tq*fit.KSEM25s
	fit.SigmaM = math.Sqrt(s2)
	fit.DatumM = d0
	// Diagnostics over the kept points (sc.w holds their weights).
	var sw, swy float64
	first, last := -1, -1
	for i, wi := range sc.w {
		if wi > 0 {
			sw += wi
			swy += wi * y[i]
			if first < 0 {
				first = i
			}
			last = i
		}
	}
	ybar := swy / sw
	var sst, dwNum, prev float64
	var ata [9]float64
	var atr [3]float64
	started := false
	for i, wi := range sc.w {
		if !(wi > 0) {
			continue
		}
		sst += wi * (y[i] - ybar) * (y[i] - ybar)
		e := math.Sqrt(wi) * (y[i] - lf.a - lf.b*x[i])
		if started {
			dwNum += (e - prev) * (e - prev)
		}
		prev, started = e, true
		col := [3]float64{1, x[i], x2[i]}
		for a := range 3 {
			atr[a] += wi * col[a] * y[i]
			for b := range 3 {
				ata[a*3+b] += wi * col[a] * col[b]
			}
		}
	}
	fit.R2 = 1 - lf.ss/sst
	if lf.ss > 0 {
		fit.DurbinWatson = dwNum / lf.ss
	}
	inflowSerial(fit, lf, x, y, tau, sc.w)
	fit.H0M = seg.HeadM[first] - d0
	fit.H1M = seg.HeadM[last] - d0
	if inv, ok := lsq.InverseSPD(ata[:], 3); ok && lf.n > 3 {
		var b1, b2 float64
		for j := range 3 {
			b1 += inv[3+j] * atr[j]
			b2 += inv[6+j] * atr[j]
		}
		var ss3 float64
		for i, wi := range sc.w {
			if wi > 0 {
				r := y[i] - (inv[0]*atr[0] + inv[1]*atr[1] + inv[2]*atr[2]) - b1*x[i] - b2*x2[i]
				ss3 += wi * r * r
			}
		}
		s3 := ss3 / float64(lf.n-3)
		ratio := b2 / b1
		v := s3 / (b1 * b1) * (inv[8] - 2*ratio*inv[5] + ratio*ratio*inv[4])
		fit.Exponent = 0.5 + ratio
		if v >= 0 {
			fit.ExponentSE = math.Sqrt(v)
		}
	}
	return nil
}

// inflowSerial corrects the standard error of K of the volume-balance line
// for serially correlated residuals, as the level fit does (see serialCov):
// on the weighted residuals sqrt(w_i)(Y_i - c + K X_i) and the weighted
// columns sqrt(w_i)(1, X_i) of the kept points, in time order.
func inflowSerial(fit *Fit, lf lineFit, x, y, tau, w []float64) {
	var tt, r, cols []float64
	var ata [4]float64
	for i, wi := range w {
		if !(wi > 0) {
			continue
		}
		sw := math.Sqrt(wi)
		tt = append(tt, tau[i])
		r = append(r, sw*(y[i]-lf.a-lf.b*x[i]))
		c0, c1 := sw, sw*x[i]
		cols = append(cols, c0, c1)
		ata[0] += c0 * c0
		ata[1] += c0 * c1
		ata[2] += c0 * c1
		ata[3] += c1 * c1
	}
	fit.EffectiveN = len(r)
	sf := serialCov(tt, r, cols, 2, 2, ata[:], make([]float64, len(r)))
	fit.ResidualRho = sf.Rho
	if sf.Omega == nil {
		return
	}
	ck := subCov(ata[:], sf.Omega, 2, 2)
	if ck == nil || !(ck[3] > 0) {
		return
	}
	if se := math.Sqrt(ck[3]); se > fit.KSEM25s {
		fit.EffectiveN = max(int(float64(len(r))*(fit.KSEM25s/se)*(fit.KSEM25s/se)), 3)
		fit.KSEM25s = se
		tq := tQuantile975(fit.EffectiveN - 2)
		fit.KLo95M25s, fit.KHi95M25s = fit.KM25s-tq*se, fit.KM25s+tq*se
	}
}
