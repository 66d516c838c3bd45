package model

import (
	"errors"
	"fmt"
	"math"
)

// Planning a commissioning drain test.
//
// A deliberate drain from h0 to h1 sampled every Δ seconds with reading
// noise σ pins K to the Cramér-Rao bound of the fit's own model: the
// information matrix I = JᵀJ/σ² with the sensitivities ∂h/∂F0, ∂h/∂K (and
// ∂y/∂d when the datum is fitted) along the drain curve, so that
// SE(K) >= σ sqrt((JᵀJ)⁻¹_KK) (Kay 1993, "Fundamentals of Statistical
// Signal Processing: Estimation Theory", §3.7; the fit reaches it on white
// noise, DEVELOPERS.md's accuracy study). With AR(1) reading noise of lag-1
// correlation ρ the variance of a smooth-regressor least-squares estimate
// is larger by about (1+ρ)/(1-ρ) (the long-run variance of an AR(1)
// process, e.g. Box, Jenkins & Reinsel, "Time Series Analysis", §2.1).
// PlanDrainTest evaluates the bound over start levels and two ends (the
// tank run empty, or half its start) and picks the shortest test that
// reaches the wanted relative SE.

// TestPlan is one candidate drain test and the precision it gives.
type TestPlan struct {
	StartHeadM, EndHeadM float64 // above the outlet, m
	SampleS              float64
	DurationS            float64
	Samples              int
	RelSE                float64 // relative standard error of K, datum known
	RelSEDatum           float64 // the same with the datum fitted
}

// PlanOptions describe the test and its transmitter.
type PlanOptions struct {
	KM25s   float64 // the K expected (design, or the baseline)
	NoiseM  float64 // reading noise σ, m
	SampleS float64 // sampling interval, s
	Rho     float64 // lag-1 correlation of the reading noise (0: white)
	Target  float64 // wanted relative SE of K (0.005 = 0.5 %)
	// MaxHeadM is the highest head the tank can be filled to (its top
	// above the outlet).
	MaxHeadM float64
}

// PlanDrainTest returns the candidate tests, from the lowest start level
// up (ends: empty, then half the start), and the shortest that reaches
// the target with the datum fitted (nil when none does).
func PlanDrainTest(t *Tank, opt PlanOptions) ([]TestPlan, *TestPlan, error) {
	if !(opt.KM25s > 0) || !(opt.NoiseM > 0) || !(opt.SampleS > 0) || !(opt.MaxHeadM > 0) || !(opt.Target > 0) {
		return nil, nil, errors.New("model: plan drain test: K, noise, sampling, target and the tank's head range must be positive")
	}
	if opt.Rho < 0 || opt.Rho >= 1 {
		return nil, nil, fmt.Errorf("model: plan drain test: noise correlation %g: want 0 <= rho < 1", opt.Rho)
	}
	ht, err := NewHeadTransform(t)
	if err != nil {
		return nil, nil, err
	}
	inflate := math.Sqrt((1 + opt.Rho) / (1 - opt.Rho))
	var rows []TestPlan
	var best *TestPlan
	for _, share := range []float64{0.25, 0.4, 0.55, 0.7, 0.85, 1} {
		h0 := share * opt.MaxHeadM
		for _, h1 := range []float64{0, h0 / 2} {
			tEnd := ht.DrainTimeS(opt.KM25s, h0, h1)
			var tau []float64
			for ts := 0.0; ts <= tEnd; ts += opt.SampleS {
				tau = append(tau, ts)
			}
			if len(tau) < 6 {
				continue
			}
			p := TestPlan{StartHeadM: h0, EndHeadM: h1, SampleS: opt.SampleS, DurationS: tEnd, Samples: len(tau),
				RelSE:      inflate * crbK(ht, opt.KM25s, h0, opt.NoiseM, tau, false) / opt.KM25s,
				RelSEDatum: inflate * crbK(ht, opt.KM25s, h0, opt.NoiseM, tau, true) / opt.KM25s}
			rows = append(rows, p)
			if p.RelSEDatum <= opt.Target && (best == nil || p.DurationS < best.DurationS) {
				b := p
				best = &b
			}
		}
	}
	return rows, best, nil
}
