package model

import (
	"errors"
	"fmt"
	"math"
	"strings"
	"sync"

	"drainsight/model/lsq"

	"gonum.org/v1/gonum/stat/distuv"
)

// FitOptions tunes FitDrain. The zero value selects every default.
type FitOptions struct {
	// Tukey selects Tukey's biweight for the stage-1 reweighting instead of
	// Huber's weights. Default false (Huber).
	Tukey bool
	// TuningC is the IRLS tuning constant in robust σ units. Default 1.345
	// for Huber and 4.685 for Tukey (95 % efficiency at the Gaussian).
	TuningC float64
	// OutlierZ: a sample whose stage-1 residual exceeds OutlierZ robust σ
	// (σ = 1.4826 MAD) is an outlier and is left out of stage 2. Default 4.5
	// (a Gaussian sample is cut with probability 7e-6).
	OutlierZ float64
	// IRLSIterations bounds the reweighting passes of stage 1, which run
	// only when some residual exceeds OutlierZ σ. Default 5.
	IRLSIterations int
	// LinearOnly stops after stage 1 and reports its weighted line
	// (Method "wls"). Default false.
	LinearOnly bool
	// MaxIterations bounds the Levenberg-Marquardt steps of stage 2.
	// Default 50.
	MaxIterations int
	// Grading holds the quality thresholds; zero fields take defaults.
	Grading GradeThresholds
}

func (o FitOptions) withDefaults() FitOptions {
	if o.TuningC <= 0 {
		o.TuningC = 1.345
		if o.Tukey {
			o.TuningC = 4.685
		}
	}
	if o.OutlierZ <= 0 {
		o.OutlierZ = 4.5
	}
	if o.IRLSIterations <= 0 {
		o.IRLSIterations = 5
	}
	if o.MaxIterations <= 0 {
		o.MaxIterations = 50
	}
	o.Grading = o.Grading.withDefaults()
	return o
}

// fitScratch holds the per-sample buffers of one fit; pooled so that a
// stream of fits allocates little.
type fitScratch struct {
	tau, z, w0, w, s []float64
	out              []bool
	cols             []float64 // Jacobian rows of the diagnostics, N×(p+1)
}

// growCols returns the Jacobian-row buffer with length n.
func (s *fitScratch) growCols(n int) []float64 {
	if cap(s.cols) < n {
		s.cols = make([]float64, n)
	}
	s.cols = s.cols[:n]
	return s.cols
}

var scratchPool = sync.Pool{New: func() any { return new(fitScratch) }}

func (s *fitScratch) grow(n int) {
	if cap(s.tau) < n {
		s.tau = make([]float64, n)
		s.z = make([]float64, n)
		s.w0 = make([]float64, n)
		s.w = make([]float64, n)
		s.s = make([]float64, n)
		s.out = make([]bool, n)
	}
	s.tau, s.z, s.w0, s.w, s.s, s.out = s.tau[:n], s.z[:n], s.w0[:n], s.w[:n], s.s[:n], s.out[:n]
}

// FitDrain fits the outlet constant K of the square-root law to one drain.
//
// Model: the tank obeys A(h) dh/dt = -K sqrt(h), so with the head transform
// F (see HeadTransform) F(h(t)) = F0 - K τ, τ = t - t_first. The reading is
// y_i = h(τ_i) + d + ε_i with white noise ε ~ N(0, σ^2) and d the datum
// offset (0 when t.DatumKnown, estimated otherwise).
//
// Stage 1 (Method "wls" if it is the last): weighted least squares of
// z_i = F(y_i - d0) on τ_i, slope -K. By the delta method
// Var z_i ≈ F'(h)^2 σ^2 = (A/sqrt h)^2 σ^2, so w_i = h_i/A(h_i)^2. The scale
// is σ = 1.4826 MAD of sqrt(w_i) (z_i - ẑ_i) (a level residual in m); when a
// residual exceeds OutlierZ σ the line is refined by IRLS (Huber or Tukey)
// and samples still beyond OutlierZ σ are outliers. Samples with
// y_i - d0 <= 0 are kept out of stage 1 (no sqrt of a negative head) and
// judged against the stage-1 curve in level units. d0 is the segment's
// EmptyHeadM for a complete drain with an unknown datum, else 0.
//
// Stage 2 (Method "nls"): nonlinear least squares on the level itself,
// minimising Σ (y_i - d - Finv(F0 - K τ_i))^2 over (F0, K[, d]) by
// Levenberg-Marquardt (package lsq) with the analytic Jacobian
// ∂h/∂F0 = sqrt(h)/A(h), ∂h/∂K = -τ sqrt(h)/A(h), ∂y/∂d = 1, started at
// stage 1. This is the maximum-likelihood estimate under Gaussian noise, so
// its variance approaches the Cramér-Rao bound. SE(K) is from
// s^2 (JᵀJ)^-1 with s^2 = SS/(N-p); the 95 % interval uses Student's t with
// N-p degrees of freedom.
//
// Known inflow (seg.InflowM3s != nil, Method "inflow"): the volume balance
// V(h_i) - ∫_0^τi q_in dt = c - K ∫_0^τi sqrt(h) dt (trapezoids) is fitted
// as a robust weighted line with w_i = 1/A(h_i)^2 (the reading noise in
// volume is A σ); c absorbs V(h_0).
//
// Submerged outlet (seg.SubmergedM != nil, Method "submerged"): the same
// balance with q = K sgn(Δ) sqrt(|Δ|), Δ the head across the outlet (the
// tank's head minus the receiving level above the outlet), see fitInflow.
//
// Diagnostics: Exponent is n of q ∝ h^n from a one-step Gauss-Newton
// update of the augmented model F_n(h) = ∫A s^-n ds at n = 1/2, whose
// sensitivity is ∂h/∂n = sqrt(h)/A(h) (L(h) - L(h0)),
// L(h) = ∫_0^h A(s) ln(s)/sqrt(s) ds; ExponentSE from the augmented
// covariance. DurbinWatson = Σ(e_i - e_{i-1})^2 / Σ e_i^2 over the level
// residuals in time order. Quality and QualityReason follow Grade.
//
// Errors: a nil segment, mismatched slices, a non-drain segment, fewer than
// 3 usable samples, an invalid tank, or a level that does not fall.
func FitDrain(t *Tank, seg *Segment, opt FitOptions) (Fit, error) {
	o := opt.withDefaults()
	if seg == nil {
		return Fit{}, &FitError{Reason: FitBadInput, Err: errors.New("nil segment")}
	}
	name := seg.Tank
	if name == "" && t != nil {
		name = t.ID
	}
	n := len(seg.TimeNs)
	switch {
	case len(seg.HeadM) != n:
		return Fit{}, &FitError{FitBadInput, name, fmt.Errorf("%d times but %d heads", n, len(seg.HeadM))}
	case seg.InflowM3s != nil && len(seg.InflowM3s) != n:
		return Fit{}, &FitError{FitBadInput, name, fmt.Errorf("%d times but %d inflow values", n, len(seg.InflowM3s))}
	case seg.SubmergedM != nil && len(seg.SubmergedM) != n:
		return Fit{}, &FitError{FitBadInput, name, fmt.Errorf("%d times but %d receiving levels", n, len(seg.SubmergedM))}
	case seg.Kind != Drain && seg.Kind != 0:
		return Fit{}, &FitError{FitBadInput, name, fmt.Errorf("segment is a %v, not a drain", seg.Kind)}
	case n < 3:
		return Fit{}, &FitError{FitTooFewSamples, name, fmt.Errorf("%d samples, need at least 3", n)}
	}
	if t == nil {
		return Fit{}, &FitError{FitBadInput, name, errors.New("nil tank")}
	}
	ht, err := TransformFor(t)
	if err != nil {
		return Fit{}, &FitError{FitBadInput, name, err}
	}
	fit := Fit{
		Tank: name, StartNs: seg.TimeNs[0], EndNs: seg.TimeNs[n-1],
		Complete: seg.Complete, EmptyHeadM: seg.EmptyHeadM, Cd: math.NaN(),
		Exponent: math.NaN(), ExponentSE: math.NaN(), DurbinWatson: math.NaN(),
		ResidualRho: math.NaN(), KPerExponent: math.NaN(), Gaps: seg.GapCount,
	}
	if !seg.Complete {
		fit.EmptyHeadM = math.NaN()
	}
	d0 := 0.0
	if !t.DatumKnown && seg.Complete && !math.IsNaN(seg.EmptyHeadM) && !math.IsInf(seg.EmptyHeadM, 0) {
		d0 = seg.EmptyHeadM
	}
	sc := scratchPool.Get().(*fitScratch)
	defer scratchPool.Put(sc)
	sc.grow(n)
	t0 := seg.TimeNs[0]
	for i, tn := range seg.TimeNs {
		sc.tau[i] = float64(tn-t0) * 1e-9
	}
	if seg.InflowM3s != nil || seg.SubmergedM != nil {
		err = fitInflow(&fit, t, ht, seg, sc, d0, o)
	} else {
		err = fitLevel(&fit, t, ht, seg, sc, d0, o)
	}
	if err != nil {
		r := FitBadInput
		var f *failure
		if errors.As(err, &f) {
			r = f.reason
		}
		return Fit{}, &FitError{Reason: r, Tank: name, Err: err}
	}
	fit.CdAM2 = CdAFromK(fit.KM25s)
	fit.Cd = CdFromK(fit.KM25s, t.OutletDiamM)
	fit.Quality, fit.QualityReason = o.Grading.Grade(&fit)
	return fit, nil
}

// tQuantile975 returns the 0.975 quantile of Student's t with df degrees
// of freedom: exact (gonum's incomplete-beta inverse) below 200 degrees of
// freedom, cached; above, the Cornish-Fisher expansion in 1/ν of
// Abramowitz & Stegun 26.7.5, whose truncation error is below 1e-8 there.
func tQuantile975(df int) float64 {
	if df <= 0 {
		return math.NaN()
	}
	if df < len(tTable) {
		tOnce.Do(func() {
			for i := 1; i < len(tTable); i++ {
				tTable[i] = distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(i)}.Quantile(0.975)
			}
		})
		return tTable[df]
	}
	const z = 1.959963984540054 // Φ^-1(0.975)
	z2 := z * z
	g1 := (z2 + 1) * z / 4
	g2 := ((5*z2+16)*z2 + 3) * z / 96
	g3 := (((3*z2+19)*z2+17)*z2 - 15) * z / 384
	g4 := ((((79*z2+776)*z2+1482)*z2-1920)*z2 - 945) * z / 92160
	v := 1 / float64(df)
	return z + v*(g1+v*(g2+v*(g3+v*g4)))
}

var (
	tTable [200]float64
	tOnce  sync.Once
)

func fitLevel(fit *Fit, t *Tank, ht *HeadTransform, seg *Segment, sc *fitScratch, d0 float64, o FitOptions) error {
	n := len(seg.HeadM)
	tau, z, w0 := sc.tau, sc.z, sc.w0
	nonFinite := 0
	for i, y := range seg.HeadM {
		if math.IsNaN(y) || math.IsInf(y, 0) {
			w0[i], z[i] = 0, 0
			nonFinite++
			continue
		}
		h := y - d0
		if h > 0 {
			f, g := ht.fg(h)
			z[i], w0[i] = f, g*g // w = h/A^2 = g^2
		} else {
			z[i], w0[i] = 0, 0
		}
	}
	lf := robustLineFit(tau, z, w0, sc.w, sc.s, sc.out, o.Tukey, o.TuningC, o.OutlierZ, o.IRLSIterations)
	if lf.n < 3 || math.IsNaN(lf.b) {
		return failf(FitTooFewSamples, "%d samples with a positive head, need at least 3", lf.n)
	}
	if !(lf.b < 0) {
		return failf(FitNotFalling, "the level does not fall (transformed slope %g m^2.5/s)", lf.b)
	}
	// Samples left out of stage 1 (head <= 0): judge them in level units.
	outliers := nonFinite
	hint := -1
	for i, y := range seg.HeadM {
		if sc.out[i] {
			outliers++
			continue
		}
		if w0[i] > 0 || math.IsNaN(y) || math.IsInf(y, 0) {
			continue
		}
		var pred float64
		pred, hint = ht.inv(lf.a+lf.b*tau[i], hint)
		if lf.sigma > 0 && math.Abs(y-d0-pred) > o.OutlierZ*lf.sigma {
			sc.out[i] = true
			outliers++
		}
	}
	fit.Outliers = outliers
	if o.LinearOnly {
		return finishLinear(fit, ht, lf, tau, n, d0)
	}
	// Compact the kept samples into (tt, yy), reusing z and w.
	tt, yy := sc.z[:0], sc.w[:0]
	for i, y := range seg.HeadM {
		if sc.out[i] || math.IsNaN(y) || math.IsInf(y, 0) {
			continue
		}
		tt = append(tt, tau[i])
		yy = append(yy, y)
	}
	m := len(tt)
	np := 2
	if !t.DatumKnown {
		np = 3
	}
	if m <= np+1 {
		return failf(FitTooFewSamples, "%d samples after removing outliers, need at least %d", m, np+2)
	}
	p0 := []float64{lf.a, -lf.b, d0}[:np]
	normal := levelNormal(ht, tt, yy, np)
	if t.SensorLagS > 0 {
		normal = lagNormal(ht, tt, yy, np, t.SensorLagS)
	}
	res, err := lsq.MinimizeNormal(normal, p0, m,
		&lsq.Options{MaxIterations: o.MaxIterations, XTol: 1e-10, FTol: 1e-13, Fused: true})
	if err != nil || res.Cov == nil || !(res.Params[1] > 0) {
		// Fall back to the stage-1 line; Grade caps it at C.
		if ferr := finishLinear(fit, ht, lf, tau, n, d0); ferr != nil {
			return ferr
		}
		fit.Method = "wls-fallback"
		return nil
	}
	f0, k := res.Params[0], res.Params[1]
	d := 0.0
	if np == 3 {
		d = res.Params[2]
	}
	df := m - np
	fit.Method = "nls"
	fit.N = m
	fit.KM25s = k
	fit.KSEM25s = res.SE[1]
	tq := tQuantile975(df)
	fit.KLo95M25s, fit.KHi95M25s = k-tq*fit.KSEM25s, k+tq*fit.KSEM25s
	fit.SigmaM = math.Sqrt(res.SS / float64(df))
	fit.DatumM = d
	fit.DatumFitted = np == 3
	fit.H0M = ht.Inv(f0)
	fit.H1M = ht.Inv(f0 - k*tau[n-1])
	levelDiagnostics(fit, ht, tt, yy, f0, k, d, np, res.SS, sc, t.SensorLagS)
	return nil
}

// levelNormal returns the stage-2 normal-equation function over (F0, K[, d]).
func levelNormal(ht *HeadTransform, tt, yy []float64, np int) lsq.NormalFunc {
	if ht.constA > 0 {
		// Closed form: h = (f/2A)^2, dh/dF = f/(2A^2).
		inv2A := 1 / (2 * ht.constA)
		return func(p, jtj, jtr []float64) float64 {
			f0, k, d := p[0], p[1], 0.0
			if np == 3 {
				d = p[2]
			}
			var ss, a00, a01, a11, a02, a12, a22, g0, g1, g2 float64
			for i, ti := range tt {
				f := f0 - k*ti
				var h, g float64
				if f > 0 {
					u := f * inv2A
					h, g = u*u, 2*u*inv2A
				}
				r := yy[i] - d - h
				ss += r * r
				gt := g * ti
				a00 += g * g
				a01 -= g * gt
				a11 += gt * gt
				a02 += g
				a12 -= gt
				g0 += g * r
				g1 -= gt * r
				g2 += r
			}
			if jtj != nil {
				fillNormal(jtj, jtr, np, len(tt), a00, a01, a11, a02, a12, a22, g0, g1, g2)
			}
			return ss
		}
	}
	return func(p, jtj, jtr []float64) float64 {
		f0, k, d := p[0], p[1], 0.0
		if np == 3 {
			d = p[2]
		}
		var ss, a00, a01, a11, a02, a12, a22, g0, g1, g2 float64
		hint := -1
		for i, ti := range tt {
			var h, g float64
			h, g, hint = ht.invG(f0-k*ti, hint)
			r := yy[i] - d - h
			ss += r * r
			gt := g * ti
			a00 += g * g
			a01 -= g * gt
			a11 += gt * gt
			a02 += g
			a12 -= gt
			g0 += g * r
			g1 -= gt * r
			g2 += r
		}
		if jtj != nil {
			fillNormal(jtj, jtr, np, len(tt), a00, a01, a11, a02, a12, a22, g0, g1, g2)
		}
		return ss
	}
}

// fillNormal writes JᵀJ and Jᵀr of the residuals r = y - d - h from the sums
// of the model derivatives m = (g, -τ g, 1): JᵀJ = Σ m mᵀ and Jᵀr = -Σ m r.
func fillNormal(jtj, jtr []float64, np, m int, a00, a01, a11, a02, a12, _, g0, g1, g2 float64) {
	if np == 2 {
		jtj[0], jtj[1], jtj[2], jtj[3] = a00, a01, a01, a11
		jtr[0], jtr[1] = -g0, -g1
		return
	}
	jtj[0], jtj[1], jtj[2] = a00, a01, a02
	jtj[3], jtj[4], jtj[5] = a01, a11, a12
	jtj[6], jtj[7], jtj[8] = a02, a12, float64(m)
	jtr[0], jtr[1], jtr[2] = -g0, -g1, -g2
}

// levelDiagnostics computes R^2, Durbin-Watson and the exponent at the
// stage-2 solution in one pass, then corrects the standard errors of K and
// of the exponent for serially correlated residuals (see serialCov).
func levelDiagnostics(fit *Fit, ht *HeadTransform, tt, yy []float64, f0, k, d float64, np int, ss float64, sc *fitScratch, lagS float64) {
	h0 := ht.Inv(f0)
	l0 := ht.logMoment(h0)
	na := np + 1
	var ata [16]float64
	var atr [4]float64
	var col [4]float64
	var sy, syy, dwNum, prev float64
	rbuf := sc.s[:len(tt)]
	cols := sc.growCols(len(tt) * na)
	// L(h(τ)) is smooth in τ: evaluate it at the ends of blocks of
	// lBlock samples and interpolate linearly in between (relative error
	// of order (block duration / drain duration)^2), which saves a
	// logarithm per sample.
	const lBlock = 8
	hint, hintB := -1, -1
	var la, lb, ta, tb float64
	blockEnd := -1
	// With a transmitter lag the model reading and its sensitivities are
	// filtered (see lagNormal), from rest at τ = 0.
	var lagOut, lagIn [5]float64
	tPrev := 0.0
	if lagS > 0 {
		hs, gs, _ := ht.invG(f0, -1)
		lagOut = [5]float64{hs, gs, 0, 1, 0}
		lagIn = lagOut
		if np == 2 {
			lagOut[2+1], lagIn[2+1] = 0, 0
		}
	}
	for i, ti := range tt {
		var h, g float64
		h, g, hint = ht.invG(f0-k*ti, hint)
		hModel := h
		if lagS > 0 {
			a, beta := lagCoef(ti-tPrev, lagS)
			hModel = lagFilter(lagOut[0], lagIn[0], h, a, beta)
			lagOut[0], lagIn[0] = hModel, h
		}
		r := yy[i] - d - hModel
		if i > 0 {
			dwNum += (r - prev) * (r - prev)
		}
		prev = r
		rbuf[i] = r
		sy += yy[i]
		syy += yy[i] * yy[i]
		if i > blockEnd {
			blockEnd = min(i+lBlock, len(tt)-1)
			ta, tb = ti, tt[blockEnd]
			la = ht.logMoment(h)
			var hb float64
			hb, hintB = ht.inv(f0-k*tb, hintB)
			lb = ht.logMoment(hb)
		}
		lh := la
		if tb > ta {
			lh = la + (lb-la)*(ti-ta)/(tb-ta)
		}
		col[0], col[1] = g, -ti*g
		if np == 3 {
			col[2] = 1
		}
		col[np] = 0
		if h > 0 {
			col[np] = g * (lh - l0)
		}
		if lagS > 0 {
			a, beta := lagCoef(ti-tPrev, lagS)
			for c := range na {
				v := lagFilter(lagOut[1+c], lagIn[1+c], col[c], a, beta)
				lagOut[1+c], lagIn[1+c] = v, col[c]
				col[c] = v
			}
			tPrev = ti
		}
		copy(cols[i*na:], col[:na])
		for a := range na {
			atr[a] += col[a] * r
			for b := range na {
				ata[a*na+b] += col[a] * col[b]
			}
		}
	}
	m := float64(len(tt))
	sst := syy - sy*sy/m
	fit.R2 = 1 - ss/sst
	if ss > 0 {
		fit.DurbinWatson = dwNum / ss
	}
	inv, ok := lsq.InverseSPD(ata[:na*na], na)
	if ok {
		var step [4]float64
		for a := range na {
			for b := range na {
				step[a] += inv[a*na+b] * atr[b]
			}
		}
		fit.Exponent = 0.5 + step[np]
		fit.KPerExponent = kPerExponent(ata[:na*na], na, np)
		if df := len(tt) - na; df > 0 {
			fit.ExponentSE = math.Sqrt(ss / float64(df) * inv[np*na+np])
		}
		// The serial correction works on the residuals of the augmented
		// model: a drain whose exponent is not 0.5 leaves a smooth,
		// repeatable misfit in the 0.5-law residuals that is no noise.
		for i := range rbuf {
			x := cols[i*na : i*na+na]
			for a := range na {
				rbuf[i] -= x[a] * step[a]
			}
		}
	}
	sf := serialCov(tt, rbuf, cols, na, na, ata[:na*na], sc.w0)
	fit.ResidualRho = sf.Rho
	fit.EffectiveN = len(tt)
	if sf.Omega == nil {
		return
	}
	if ck := subCov(ata[:na*na], sf.Omega, na, np); ck != nil && ck[np+1] > 0 {
		se := math.Sqrt(ck[np+1])
		if se > fit.KSEM25s {
			neff := m * (fit.KSEM25s / se) * (fit.KSEM25s / se)
			fit.EffectiveN = max(int(neff), np+1)
			fit.KSEM25s = se
			tq := tQuantile975(fit.EffectiveN - np)
			fit.KLo95M25s, fit.KHi95M25s = k-tq*se, k+tq*se
		}
	}
	if ok {
		if cn := sandwich(inv, sf.Omega, na); cn[np*na+np] > 0 {
			fit.ExponentSE = math.Max(fit.ExponentSE, math.Sqrt(cn[np*na+np]))
		}
	}
}

// finishLinear reports the stage-1 line as the estimate (Method "wls").
func finishLinear(fit *Fit, ht *HeadTransform, lf lineFit, tau []float64, n int, d0 float64) error {
	df := lf.n - 2
	if df <= 0 || !(lf.sxx > 0) {
		return failf(FitTooFewSamples, "%d usable samples, need at least 3", lf.n)
	}
	s2 := lf.ss / float64(df)
	fit.Method = "wls"
	fit.N = lf.n
	fit.EffectiveN = lf.n
	fit.KM25s = -lf.b
	fit.KSEM25s = math.Sqrt(s2 / lf.sxx)
	tq := tQuantile975(df)
	fit.KLo95M25s, fit.KHi95M25s = fit.KM25s-tq*fit.KSEM25s, fit.KM25s+tq*fit.KSEM25s
	fit.SigmaM = math.Sqrt(s2)
	fit.DatumM = d0
	fit.H0M = ht.Inv(lf.a)
	fit.H1M = ht.Inv(lf.a + lf.b*tau[n-1])
	return nil
}

// GradeThresholds are the limits of Grade. Zero fields take the defaults
// given beside them.
type GradeThresholds struct {
	MinSamples        int     // reject below; default 10
	FewSamples        int     // C below; default 30
	RelSEReject       float64 // reject when SE(K)/K >= this; default 0.25
	RelSEC            float64 // C when SE(K)/K >= this; default 0.05
	RelSEB            float64 // B when SE(K)/K >= this; default 0.02
	MinRangeSigma     float64 // reject when the fitted head range H0-H1 < this × σ; default 10
	MinRangeFraction  float64 // C when (H0-H1)/H0 < this; default 0.05
	ExponentZ         float64 // the exponent rules need |n-0.5| >= this × SE(n); default 3
	ExponentDevB      float64 // B when |n-0.5| >= this; default 0.1 (n 0.4-0.6 stays A)
	ExponentDevC      float64 // C when |n-0.5| >= this; default 0.2 (n 0.3-0.7 stays usable)
	OutlierFracB      float64 // B when outliers/(N+outliers) >= this; default 0.02
	OutlierFracC      float64 // C when >= this; default 0.10
	OutlierFracReject float64 // reject when >= this; default 0.25
}

func (g GradeThresholds) withDefaults() GradeThresholds {
	def := func(v *float64, d float64) {
		if *v <= 0 {
			*v = d
		}
	}
	if g.MinSamples <= 0 {
		g.MinSamples = 10
	}
	if g.FewSamples <= 0 {
		g.FewSamples = 30
	}
	def(&g.RelSEReject, 0.25)
	def(&g.RelSEC, 0.05)
	def(&g.RelSEB, 0.02)
	def(&g.MinRangeSigma, 10)
	def(&g.MinRangeFraction, 0.05)
	def(&g.ExponentZ, 3)
	def(&g.ExponentDevB, 0.1)
	def(&g.ExponentDevC, 0.2)
	def(&g.OutlierFracB, 0.02)
	def(&g.OutlierFracC, 0.10)
	def(&g.OutlierFracReject, 0.25)
	return g
}

// Grade assigns the quality of a fit, which says whether its K is fit for
// trending: A and B are, C is shown but not trusted, reject is not used.
// The grade is the worst of the rules, and the reason names every rule
// that applied, worst first, in plain words, joined by "; ":
//
//	reject: N < MinSamples; K not positive and finite; SE(K)/K >= RelSEReject;
//	        head range H0-H1 < MinRangeSigma σ; outlier fraction >= OutlierFracReject
//	C:      N < FewSamples; SE(K)/K >= RelSEC; (H0-H1)/H0 < MinRangeFraction;
//	        |n-0.5| >= ExponentDevC (and >= ExponentZ SE(n)); outlier fraction
//	        >= OutlierFracC; a fallback estimator
//	B:      SE(K)/K >= RelSEB; |n-0.5| >= ExponentDevB (and >= ExponentZ SE(n));
//	        outlier fraction >= OutlierFracB; data gaps inside the drain
//
// SE(K) and SE(n) are the serial-correlation corrected errors (see
// serialCov), so the precision rules already account for residuals that are
// not white; the Durbin-Watson statistic is reported but not graded (real
// transmitters are never white, and a precise K from a correlated drain is
// still a precise K). An exponent of 0.4-0.6 is within what real free
// outlets show (a coefficient drifting with the Reynolds number, sensor
// lag); 0.6-0.7 is usable but worth a look; beyond, the drain does not
// follow the square-root law. Non-finite diagnostics are not graded.
func (g GradeThresholds) Grade(f *Fit) (Quality, string) {
	g = g.withDefaults()
	var rej, c, b []string
	relSE := f.KSEM25s / f.KM25s
	if f.N < g.MinSamples {
		rej = append(rej, fmt.Sprintf("too few samples to fit (%d, need %d)", f.N, g.MinSamples))
	} else if f.N < g.FewSamples {
		c = append(c, fmt.Sprintf("few samples (%d, want %d)", f.N, g.FewSamples))
	}
	if !(f.KM25s > 0) || math.IsInf(f.KM25s, 0) {
		rej = append(rej, fmt.Sprintf("outlet constant %g is not positive", f.KM25s))
	}
	uncertain := func(limit float64) string {
		return fmt.Sprintf("K is uncertain: standard error %.2g %% of K (limit %g %%)", 100*relSE, 100*limit)
	}
	switch {
	case !(relSE < g.RelSEReject):
		rej = append(rej, uncertain(g.RelSEReject))
	case relSE >= g.RelSEC:
		c = append(c, uncertain(g.RelSEC))
	case relSE >= g.RelSEB:
		b = append(b, uncertain(g.RelSEB))
	}
	rng := f.H0M - f.H1M
	if f.SigmaM > 0 && rng < g.MinRangeSigma*f.SigmaM {
		rej = append(rej, fmt.Sprintf("the level fell only %.3g m, under %g times the reading noise", rng, g.MinRangeSigma))
	} else if f.H0M > 0 && rng/f.H0M < g.MinRangeFraction {
		c = append(c, fmt.Sprintf("the drain covers only %.1f %% of its starting head (want %g %%)", 100*rng/f.H0M, 100*g.MinRangeFraction))
	}
	if dev := math.Abs(f.Exponent - 0.5); !math.IsNaN(dev) && f.ExponentSE >= 0 && dev >= g.ExponentZ*f.ExponentSE {
		why := "the outlet may be a long pipe or a valve in laminar flow, or partly submerged"
		if f.Exponent < 0.5 {
			why = "the outlet may discharge into a vessel whose level rises, or something still flows in"
		}
		msg := fmt.Sprintf("the level does not follow the square-root law: exponent %.2f ± %.2f; %s", f.Exponent, f.ExponentSE, why)
		switch {
		case dev >= g.ExponentDevC:
			c = append(c, msg)
		case dev >= g.ExponentDevB:
			b = append(b, msg)
		}
	}
	if tot := f.N + f.Outliers; tot > 0 {
		frac := float64(f.Outliers) / float64(tot)
		msg := fmt.Sprintf("%.0f %% of the samples are outliers", 100*frac)
		switch {
		case frac >= g.OutlierFracReject:
			rej = append(rej, msg)
		case frac >= g.OutlierFracC:
			c = append(c, msg)
		case frac >= g.OutlierFracB:
			b = append(b, msg)
		}
	}
	if f.Gaps > 0 {
		b = append(b, fmt.Sprintf("%d data gap(s) inside the drain", f.Gaps))
	}
	if f.Method == "wls-fallback" {
		c = append(c, "the nonlinear fit failed; the first-stage line is reported")
	}
	all := append(append(rej, c...), b...)
	reason := strings.Join(all, "; ")
	switch {
	case len(rej) > 0:
		return QualityReject, reason
	case len(c) > 0:
		return QualityC, reason
	case len(b) > 0:
		return QualityB, reason
	}
	return QualityA, ""
}

// kPerExponent returns dK/dn, how the outlet constant of the model
// q = K_n h^n fitted to the same drain moves with the exponent held at n
// near 1/2: with the augmented normal matrix A (columns θ = (F0, K[, d])
// and n last), K_n ≈ K - (A_θθ^-1 A_θn)_K (n - 1/2) (the conditional
// least-squares step). NaN when A_θθ is singular.
func kPerExponent(ata []float64, na, np int) float64 {
	a := make([]float64, np*np)
	for i := range np {
		for j := range np {
			a[i*np+j] = ata[i*na+j]
		}
	}
	inv, ok := lsq.InverseSPD(a, np)
	if !ok {
		return math.NaN()
	}
	var v float64
	for j := range np {
		v += inv[np+j] * ata[j*na+np]
	}
	return -v
}

// KAtReference returns the outlet constant of the fit expressed at the
// exponent n and the reference head hRefM: q(h_ref)/sqrt(h_ref) of the
// outlet q = K_n h^n, K_n = K + KPerExponent (n - 1/2). For n = 1/2 it is
// K itself. It is how drains of an outlet that departs from the
// square-root law consistently (a long tube, a valve in transitional flow)
// compare: a partial drain from the top and a full drain weigh different
// heads, and their square-root K differ by about (h1/h2)^(n-1/2), while
// their K at one reference head agree. The relative standard error is
// that of K (the exponent is the tank's, not this drain's).
func KAtReference(f Fit, n, hRefM float64) float64 {
	if n == 0.5 || math.IsNaN(n) || !(hRefM > 0) || math.IsNaN(f.KPerExponent) {
		return f.KM25s
	}
	kn := f.KM25s + f.KPerExponent*(n-0.5)
	return kn * math.Pow(hRefM, n-0.5)
}
