package model

import (
	"math"
	"math/rand/v2"
	"testing"
)

// The realistic accuracy study. Targets from the project's own requirement
// (95 % intervals that hold on real transmitters): every row covers the
// truth in at least 75 % of drains and at most 99.5 % (200 drains per row
// would put a true 95 % inside 91.5-98.5 % nineteen times in twenty; the
// wider band is for the short, strongly correlated rows DEVELOPERS.md lists
// as short of 93 %), the rows together cover 93-97 %, and at least 95 % of these clean
// drains are graded usable (A or B). The Reynolds rows' coefficient is
// Lichtarowicz et al. (1965); see benchCd.
func TestRealisticStudy(t *testing.T) {
	if testing.Short() {
		t.Skip("realistic accuracy study")
	}
	rows := RealisticStudy(RealisticOptions{Seed: 5, Replicates: 200, Shapes: []string{"vertical", "horizontal"}})
	t.Log("\n" + FormatRealisticTable(rows))
	var covered, fitted, usable float64
	for _, r := range rows {
		if r.Fitted == 0 || r.Failed > 0 {
			t.Errorf("%s %s %s: fitted %d, failed %d", r.Disturbance, r.Shape, r.Drain, r.Fitted, r.Failed)
			continue
		}
		if r.Coverage < 0.75 || r.Coverage > 0.995 {
			t.Errorf("%s %s %s: coverage %.1f %%, want 75-99.5 %%", r.Disturbance, r.Shape, r.Drain, 100*r.Coverage)
		}
		covered += r.Coverage * float64(r.Fitted)
		usable += r.Usable * float64(r.Fitted)
		fitted += float64(r.Fitted)
	}
	if c := covered / fitted; c < 0.93 || c > 0.97 {
		t.Errorf("coverage over all rows %.1f %%, want 93-97 %%", 100*c)
	}
	if u := usable / fitted; u < 0.95 {
		t.Errorf("usable %.1f %% of clean drains, want >= 95 %%", 100*u)
	}
}

// The O(N) forward-filter form of Σ_ij x_i x_jᵀ ρ^{|t_i-t_j|/Δ} used by
// serialCov equals the double sum written out (its definition), on an
// irregular time base with a gap.
func TestSerialOmegaMatchesDoubleSum(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	const n, na = 300, 3
	tt := make([]float64, n)
	cols := make([]float64, n*na)
	r := make([]float64, n)
	e := 0.0
	for i := range n {
		tt[i] = float64(i)*10 + rng.Float64()
		if i > 150 {
			tt[i] += 600 // a gap
		}
		x := tt[i] / 10 // any smooth columns
		cols[i*na], cols[i*na+1], cols[i*na+2] = 1, x/1000, math.Sqrt(x+1)
		e = 0.9*e + rng.NormFloat64()
		r[i] = e
	}
	var ata [9]float64
	for i := range n {
		for a := range na {
			for b := range na {
				ata[a*na+b] += cols[i*na+a] * cols[i*na+b]
			}
		}
	}
	sf := serialCov(tt, r, cols, na, na, ata[:], make([]float64, n))
	if sf.Omega == nil {
		t.Fatal("no correction on AR(1) residuals with ρ 0.9")
	}
	// Rebuild Ω by the double sum with the estimator's own ρ, λ and γ.
	delta := 10.0
	{
		d := make([]float64, n-1)
		for i := 1; i < n; i++ {
			d[i-1] = tt[i] - tt[i-1]
		}
		delta = medianInPlace(d)
	}
	var want [9]float64
	for i := range n {
		for j := range n {
			w := math.Pow(sf.Rho, math.Abs(tt[i]-tt[j])/delta)
			for a := range na {
				for b := range na {
					want[a*na+b] += cols[i*na+a] * cols[j*na+b] * w
				}
			}
		}
	}
	// Ω = λ (γ_AR S + σw² A): solve for σw² from one element, check all.
	k := sf.Lambda * sf.Gamma0
	white := (sf.Omega[0]/sf.Lambda - sf.Gamma0*want[0]) / ata[0]
	for a := range na * na {
		got := sf.Omega[a]
		exp := k*want[a] + sf.Lambda*white*ata[a]
		if math.Abs(got-exp) > 1e-9*math.Abs(exp)+1e-12 {
			t.Errorf("Ω[%d] = %g, double sum gives %g", a, got, exp)
		}
	}
}

// A drain read through a 60 s transmitter lag (the simulator integrates
// τ dy/dt = h - y by Runge-Kutta, independently of the fit's recursion):
// with the lag configured K is within 0.1 % and inside its interval;
// without, the start bends the fit off by more than 1 %.
func TestFitSensorLag(t *testing.T) {
	tank, k, h0, _ := accuracyTank("vertical")
	ht, _ := NewHeadTransform(tank)
	clean := cleanReading(ht, func(float64) float64 { return k }, h0, 10, ht.DrainTimeS(k, h0, h0/2), 60)
	var seg Segment
	disturb(&seg, clean, 10, 0.001, Disturbance{}, rand.New(rand.NewPCG(1, 1)))
	seg.Tank, seg.Kind, seg.EmptyHeadM = "vertical", Drain, math.NaN()
	plain, err := FitDrain(tank, &seg, FitOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if e := math.Abs(plain.KM25s/k - 1); e < 0.01 {
		t.Errorf("lag not configured: K off by %.2f %%, want > 1 %% (the lag matters)", 100*e)
	}
	lagged := *tank
	lagged.SensorLagS = 60
	f, err := FitDrain(&lagged, &seg, FitOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if e := math.Abs(f.KM25s/k - 1); e > 0.001 || f.KLo95M25s > k || f.KHi95M25s < k {
		t.Errorf("lag configured: K %g [%g, %g], true %g", f.KM25s, f.KLo95M25s, f.KHi95M25s, k)
	}
}

// A complete cone drain read through a 5 s lag: at the apex the level
// falls as (T-t)^0.4, fastest in the last sampling interval, where a
// straight line between the samples misplaces the lag's input. With the
// interval filtered in sub-steps the noise-free reading (the simulator's
// Runge-Kutta integration) gives K to 0.005 %; the straight-line hold gave
// 0.015 % off here, and -0.036 % on average at 2 mm in the realistic study
// (63.5 % coverage).
func TestFitSensorLagConeApex(t *testing.T) {
	tank, k, h0, _ := accuracyTank("cone")
	ht, _ := NewHeadTransform(tank)
	clean := cleanReading(ht, func(float64) float64 { return k }, h0, 10, ht.DrainTimeS(k, h0, 0), 5)
	var seg Segment
	disturb(&seg, clean, 10, 1e-7, Disturbance{}, rand.New(rand.NewPCG(1, 2)))
	seg.Tank, seg.Kind, seg.EmptyHeadM, seg.Complete = "cone", Drain, 0, true
	lagged := *tank
	lagged.SensorLagS = 5
	f, err := FitDrain(&lagged, &seg, FitOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if e := math.Abs(f.KM25s/k - 1); e > 5e-5 {
		t.Errorf("cone apex through a 5 s lag: K off by %.4f %%, want within 0.005 %%", 100*e)
	}
}
