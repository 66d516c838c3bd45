package detect

import "math"

// stepRampFit compares two change models for ln K (y) at times t (days,
// increasing), each with a free pre-change level a and one change parameter,
// profiled over the change index τ:
//
//	step:        y_i = a + δ 1[i >= τ]                  (τ = 1..n-1)
//	broken line: y_i = a + β max(0, t_i - t_τ)          (τ = 0..n-2)
//
// Both have three parameters (a, δ or β, τ), so with a common known
// variance σ² the log-likelihoods differ by (RSS_step - RSS_ramp)/(2σ²) and
// BIC prefers the model with the smaller residual sum of squares. Sums are
// accumulated as suffix sums, so the profile costs O(n).
type stepRampFit struct {
	N                int
	RSSNone          float64 // constant level only
	RSSStep, RSSRamp float64
	StepIndex        int       // first changed point of the best step
	Shift            float64   // δ
	RampIndex        int       // kink of the best broken line (last unchanged point)
	Slope            float64   // β per day
	rssStep, rssRamp []float64 // profiles over τ (+Inf where undefined)
}

// interval returns the indices whose profile RSS is within 2σ²×1.92 of the
// minimum (a profile-likelihood 95 % interval for τ with known variance σ²).
func profileInterval(rss []float64, best int, s2 float64) (lo, hi int) {
	lo, hi = best, best
	lim := rss[best] + 2*s2*profileDrop
	for i, v := range rss {
		if v <= lim {
			lo, hi = min(lo, i), max(hi, i)
		}
	}
	return lo, hi
}

func fitStepRamp(t, y []float64) stepRampFit {
	n := len(y)
	f := stepRampFit{N: n, RSSStep: math.Inf(1), RSSRamp: math.Inf(1)}
	if n < 3 {
		return f
	}
	f.rssStep = make([]float64, n)
	f.rssRamp = make([]float64, n)
	for i := range n {
		f.rssStep[i], f.rssRamp[i] = math.Inf(1), math.Inf(1)
	}
	t0 := t[0]
	// Suffix sums over i >= j of y, y², t, t², t y (t relative to t0).
	sy := make([]float64, n+1)
	syy := make([]float64, n+1)
	st := make([]float64, n+1)
	stt := make([]float64, n+1)
	sty := make([]float64, n+1)
	for i := n - 1; i >= 0; i-- {
		ti := t[i] - t0
		sy[i] = sy[i+1] + y[i]
		syy[i] = syy[i+1] + y[i]*y[i]
		st[i] = st[i+1] + ti
		stt[i] = stt[i+1] + ti*ti
		sty[i] = sty[i+1] + ti*y[i]
	}
	nf := float64(n)
	ybar := sy[0] / nf
	syyC := syy[0] - sy[0]*ybar
	f.RSSNone = syyC
	for tau := 1; tau < n; tau++ {
		n1, n2 := float64(tau), float64(n-tau)
		s1, s2 := sy[0]-sy[tau], sy[tau]
		rss := syy[0] - s1*s1/n1 - s2*s2/n2
		f.rssStep[tau] = rss
		if rss < f.RSSStep {
			f.RSSStep, f.StepIndex, f.Shift = rss, tau, s2/n2-s1/n1
		}
	}
	for tau := 0; tau < n-1; tau++ {
		j := tau + 1
		m := float64(n - j)
		tk := t[tau] - t0
		sx := st[j] - m*tk
		sxx := stt[j] - 2*tk*st[j] + m*tk*tk
		sxy := sty[j] - tk*sy[j]
		sxxC := sxx - sx*sx/nf
		sxyC := sxy - sx*sy[0]/nf
		if sxxC <= 0 {
			continue
		}
		rss := syyC - sxyC*sxyC/sxxC
		f.rssRamp[tau] = rss
		if rss < f.RSSRamp {
			f.RSSRamp, f.RampIndex, f.Slope = rss, tau, sxyC/sxxC
		}
	}
	f.RSSStep = math.Max(f.RSSStep, 0)
	f.RSSRamp = math.Max(f.RSSRamp, 0)
	return f
}
