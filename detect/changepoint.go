package detect

import "math"

// ChangePoint locates a single shift in the mean of standardised data.
//
// For z_1..z_n ~ N(μ_1, 1) before the change and N(μ_2, 1) from index Index
// on (0-based: z[Index] is the first changed value), the log-likelihood gain
// of a split at τ over no split is
//
//	G(τ) = τ (n - τ) / (2n) × (mean(z[:τ]) - mean(z[τ:]))^2,
//
// maximised over τ = 1..n-1. Shift is mean(z[Index:]) - mean(z[:Index]) and
// LLR = G(Index). The onset interval [Lo, Hi] holds every split whose gain is
// within χ²_1(0.95)/2 = 1.92 of the maximum (a profile-likelihood interval).
// PValue is the Bonferroni bound (n-1) × P(χ²_1 > 2 LLR), capped at 1, a
// conservative p-value for "some change happened".
type ChangePoint struct {
	Index  int
	Lo, Hi int
	Shift  float64
	LLR    float64
	PValue float64
}

// profileDrop is χ²_1(0.95)/2.
const profileDrop = 3.841458820694124 / 2

// MeanShift returns the most likely single change in the mean of z (unit
// variance). With fewer than 2 values it returns Index 0 and PValue 1.
func MeanShift(z []float64) ChangePoint {
	n := len(z)
	cp := ChangePoint{PValue: 1}
	if n < 2 {
		return cp
	}
	cum := make([]float64, n+1)
	for i, v := range z {
		cum[i+1] = cum[i] + v
	}
	gain := make([]float64, n)
	best := -1.0
	for tau := 1; tau < n; tau++ {
		m1 := cum[tau] / float64(tau)
		m2 := (cum[n] - cum[tau]) / float64(n-tau)
		g := float64(tau) * float64(n-tau) / (2 * float64(n)) * (m1 - m2) * (m1 - m2)
		gain[tau] = g
		if g > best {
			best, cp.Index, cp.Shift = g, tau, m2-m1
		}
	}
	cp.LLR = best
	cp.Lo, cp.Hi = cp.Index, cp.Index
	for tau := 1; tau < n; tau++ {
		if gain[tau] >= best-profileDrop {
			cp.Lo = min(cp.Lo, tau)
			cp.Hi = max(cp.Hi, tau)
		}
	}
	p := float64(n-1) * math.Erfc(math.Sqrt(best)) // P(χ²_1 > 2G) = erfc(sqrt(G))
	cp.PValue = math.Min(1, p)
	return cp
}

// shapeFit compares a step and a ramp for a change in standardised data z at
// times t (days) whose pre-change level is zero by construction:
//
//	step: z_i = δ 1[t_i >= t_τ],   ramp: z_i = β max(0, t_i - t_τ)
//
// each profiled over the onset τ (two parameters each, so the maximised
// log-likelihoods compare directly). It returns both log-likelihood gains
// over "no change", and the ramp onset and slope (z per day).
type shapeFit struct {
	StepGain, RampGain float64
	StepIndex          int
	RampIndex          int
	RampSlope          float64
}

func fitShape(t, z []float64) shapeFit {
	n := len(z)
	var sf shapeFit
	// Step with known zero pre-level: δ̂ = mean(z[τ:]), gain = (n-τ) δ̂²/2.
	suffix := 0.0
	for tau := n - 1; tau >= 0; tau-- {
		suffix += z[tau]
		m := float64(n - tau)
		if g := suffix * suffix / (2 * m); g > sf.StepGain {
			sf.StepGain, sf.StepIndex = g, tau
		}
	}
	// Ramp: β̂ = Σ x z / Σ x², gain = (Σ x z)² / (2 Σ x²), x = t - t_τ.
	for tau := 0; tau < n-1; tau++ {
		var sxz, sxx float64
		for i := tau + 1; i < n; i++ {
			x := t[i] - t[tau]
			sxz += x * z[i]
			sxx += x * x
		}
		if sxx == 0 {
			continue
		}
		if g := sxz * sxz / (2 * sxx); g > sf.RampGain {
			sf.RampGain, sf.RampIndex, sf.RampSlope = g, tau, sxz/sxx
		}
	}
	return sf
}
