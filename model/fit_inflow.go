package model

import (
	"math"

	"drainsight/model/lsq"
)

// fitInflow fits the volume balance of a drain with metered inflow, with a
// submerged outlet, or both:
//
//	Y_i = V(h_i) - ∫_0^τi q_in dt = c - K X_i,   X_i = ∫_0^τi sgn(Δ) sqrt(|Δ|) dt,
//
// both integrals by trapezoids on the samples, h_i = y_i - d0, and Δ the
// head across the outlet: h minus the receiving vessel's liquid level above
// the outlet (Segment.SubmergedM, 0 when it lies below the outlet or the
// outlet discharges freely), so that q = K sgn(Δ) sqrt(|Δ|) also holds
// for flow back through the outlet (Δ < 0). The reading noise σ becomes
// A(h_i) σ in Y_i, so the weights are 1/A(h_i)^2 and sqrt(w) × residual is
// a level residual (the receiving level's own noise enters X only through
// the integral, which averages it). The exponent comes from adding
// X2_i = ∫ sgn(Δ) sqrt(|Δ|) ln|Δ| dt: ∫ |Δ|^n dt ≈ X + (n - 1/2) X2, so
// Y = c + b1 X + b2 X2 gives n = 1/2 + b2/b1 (delta-method SE). H0M and
// H1M are the first and last kept readings minus d0. Samples whose inflow
// or receiving level is missing (NaN) are skipped, their intervals
// integrated across.
func fitInflow(fit *Fit, t *Tank, ht *HeadTransform, seg *Segment, sc *fitScratch, d0 float64, o FitOptions) error {
	n := len(seg.HeadM)
	tau := sc.tau
	x, y, w0 := sc.z, sc.s, sc.w0
	x2 := make([]float64, n)
	absDh := make([]float64, n) // |Δ| per sample, for the noise the integral carries
	nonFinite := 0
	var cumQ, cumX, cumX2 float64
	var prevQ, prevS, prevSL float64
	prevOK := false
	for i, hm := range seg.HeadM {
		q, sub := 0.0, 0.0
		if seg.InflowM3s != nil {
			q = seg.InflowM3s[i]
		}
		if seg.SubmergedM != nil {
			sub = seg.SubmergedM[i]
		}
		if math.IsNaN(hm) || math.IsInf(hm, 0) || math.IsNaN(q) || math.IsInf(q, 0) || math.IsNaN(sub) || math.IsInf(sub, 0) {
			w0[i] = 0
			nonFinite++
			continue
		}
		h := hm - d0
		dh := math.Max(h, 0) - math.Max(sub, 0)
		absDh[i] = math.Abs(dh)
		s := math.Copysign(math.Sqrt(math.Abs(dh)), dh)
		sl := 0.0
		if dh != 0 {
			sl = s * math.Log(math.Abs(dh))
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
		return failf(FitTooFewSamples, "%d usable samples for the volume balance, need at least 3", lf.n)
	}
	if !(lf.b < 0) {
		return failf(FitNotFalling, "the volume balance shows no outflow (slope %g m^2.5/s)", lf.b)
	}
	outliers := nonFinite
	for i := range n {
		if sc.out[i] {
			outliers++
		}
	}
	s2 := lf.ss / float64(df)
	fit.Method = "inflow"
	if seg.SubmergedM != nil {
		fit.Method = "submerged"
	}
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
	// The readings also enter X, under the square root: add that part.
	sigmaDh2 := fit.SigmaM * fit.SigmaM
	if seg.SubmergedM != nil {
		sigmaDh2 *= 2 // the receiving level is read as noisily
	}
	if v := integralNoiseVar(tau, absDh, sc.w, x, sigmaDh2); v > 0 {
		se := math.Hypot(fit.KSEM25s, fit.KM25s*math.Sqrt(v))
		tq := tQuantile975(max(fit.EffectiveN-2, 1))
		fit.KSEM25s = se
		fit.KLo95M25s, fit.KHi95M25s = fit.KM25s-tq*se, fit.KM25s+tq*se
	}
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

// integralNoiseVar is the variance that the reading noise inside X adds
// to the slope -K of the volume-balance line, relative to K^2. With
// sqrt(|Δ|) read with error e_j/(2 sqrt|Δ_j|), Var e_j = sigmaDh2, X_i carries
// the sum of the trapezoid increments up to i, a random walk whose steps
// have variance v_m = (τ_m - τ_{m-1})^2 sigmaDh2 / (4 |Δ_m|) (the two
// trapezoid halves of a step taken as one). The weighted slope is
// b = Σ c_i Y_i with c_i = w_i (X_i - X̄)/Σ w (X - X̄)^2, so its error from X is
// -K Σ c_i δX_i, of variance K^2 Σ_m v_m (Σ_{i≥m} c_i)^2 (first-order
// errors in variables, Fuller 1987, "Measurement Error Models", §1.1).
// Small for a free outlet (|Δ| = h is large), it dominates a submerged
// outlet near equal levels. Samples with |Δ| below the noise count as
// |Δ| = σ (the square root's error is then bounded by sqrt σ).
func integralNoiseVar(tau, absDh, w, x []float64, sigmaDh2 float64) float64 {
	if !(sigmaDh2 > 0) {
		return 0
	}
	var sw, swx float64
	for i, wi := range w {
		if wi > 0 {
			sw += wi
			swx += wi * x[i]
		}
	}
	if !(sw > 0) {
		return 0
	}
	xb := swx / sw
	var sxx float64
	for i, wi := range w {
		if wi > 0 {
			sxx += wi * (x[i] - xb) * (x[i] - xb)
		}
	}
	if !(sxx > 0) {
		return 0
	}
	floor := math.Sqrt(sigmaDh2)
	var tail, v float64
	for m := len(w) - 1; m >= 1; m-- {
		if w[m] > 0 {
			tail += w[m] * (x[m] - xb) / sxx
		}
		dt := tau[m] - tau[m-1]
		d := math.Max(absDh[m], floor)
		v += dt * dt * sigmaDh2 / (4 * d) * tail * tail
	}
	return v
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
