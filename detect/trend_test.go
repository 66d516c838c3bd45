package detect

import (
	"math"
	"testing"
)

// USEPA (2009) Unified Guidance, EPA 530/R-09-007, Example 17-6 (sulfate),
// data from R EnvStats EPA.09.Ex.17.6.sulfate.df and results from the EnvStats
// script reproducing the Guidance's chapter 17 examples (S2 + C in
// shared/refdata/REFERENCES.md §4a).
func TestMannKendallEPA17_6(t *testing.T) {
	date := []float64{89.6, 89.8, 90.1, 90.3, 90.6, 90.8, 91.1, 91.3, 91.6, 91.8, 92.1, 92.6, 93.1, 93.6, 94.1, 94.6, 95.1, 95.6, 95.8, 96.1, 96.3, 96.6, 96.8}
	sulfate := []float64{480, 450, 490, 520, 485, 510, 510, 530, 510, 560, 560, 540, 590, 550, 600, 700, 570, 610, 650, 620, 830, 720, 590}
	mk := MannKendall(sulfate)
	checks := []struct {
		name      string
		got, want float64
		tol       float64
	}{
		{"S", mk.S, 194, 0},              // C
		{"VarS", mk.VarS, 1428, 1e-9},    // C (tie groups 3, 2, 2)
		{"Z", mk.Z, 5.107322, 5e-7},      // S2
		{"p", mk.P, 3.267574e-07, 5e-13}, // S2
		{"tau", mk.Tau, 0.7667984, 5e-8}, // S2
	}
	ts := TheilSen(date, sulfate, 0.95)
	checks = append(checks, []struct {
		name      string
		got, want float64
		tol       float64
	}{
		{"slope", ts.Slope, 26.6666667, 5e-7},            // S2
		{"intercept", ts.Intercept, -1909.3333333, 5e-6}, // S2 (Conover)
		{"CI lo", ts.Lo, 20.00000, 5e-6},                 // S2 (Gilbert)
		{"CI hi", ts.Hi, 35.71182, 5e-6},                 // S2 (Gilbert)
	}...)
	for _, c := range checks {
		if math.Abs(c.got-c.want) > c.tol {
			t.Errorf("Example 17-6 %s: got %.9g, want %.9g", c.name, c.got, c.want)
		}
	}
}

// USEPA (2009) Unified Guidance Example 17-7 (sodium), EnvStats
// EPA.09.Ex.17.7.sodium.df and script output (S2 + C, REFERENCES §4b).
func TestTheilSenEPA17_7(t *testing.T) {
	year := []float64{89.6, 90.1, 90.8, 91.1, 92.1, 93.1, 94.1, 95.6, 96.1, 96.3}
	sodium := []float64{56, 53, 51, 55, 52, 60, 62, 59, 61, 63}
	mk := MannKendall(sodium)
	ts := TheilSen(year, sodium, 0.95)
	checks := []struct {
		name      string
		got, want float64
		tol       float64
	}{
		{"S", mk.S, 25, 0},                             // C
		{"VarS", mk.VarS, 125, 1e-9},                   // C
		{"Z", mk.Z, 2.146625, 5e-7},                    // S2
		{"p", mk.P, 0.03182313, 5e-9},                  // S2
		{"tau", mk.Tau, 0.5555556, 5e-8},               // S2
		{"slope", ts.Slope, 1.3333333, 5e-8},           // S2
		{"intercept", ts.Intercept, -65.9666667, 5e-7}, // S2
		{"CI lo", ts.Lo, 0.3992083, 5e-8},              // S2 (Gilbert)
		{"CI hi", ts.Hi, 2.3333333, 5e-8},              // S2 (Gilbert)
	}
	for _, c := range checks {
		if math.Abs(c.got-c.want) > c.tol {
			t.Errorf("Example 17-7 %s: got %.9g, want %.9g", c.name, c.got, c.want)
		}
	}
}

// USEPA (2006) QA/G-9S, EPA/240/B-06/003, p. 109, as transcribed in the
// EarthSoft "Mann Kendall Trend Evaluation" help page (S2, REFERENCES §4c):
// tie groups 4 and 2, S = 22, Var(S) = 155.33, Z = 1.685; p two-sided 0.0920
// and the index-time Theil-Sen slope 1.0 are computed (C).
func TestMannKendallG9S(t *testing.T) {
	x := []float64{10, 10, 10, 5, 10, 20, 18, 17, 15, 24, 15}
	mk := MannKendall(x)
	idx := make([]float64, len(x))
	for i := range idx {
		idx[i] = float64(i + 1)
	}
	ts := TheilSen(idx, x, 0.95)
	checks := []struct {
		name      string
		got, want float64
		tol       float64
	}{
		{"S", mk.S, 22, 0},
		{"VarS", mk.VarS, 155.33, 0.005},
		{"Z", mk.Z, 1.685, 0.0005},
		{"p", mk.P, 0.0920, 0.00005},
		{"slope", ts.Slope, 1.0, 1e-12},
	}
	for _, c := range checks {
		if math.Abs(c.got-c.want) > c.tol {
			t.Errorf("G-9S %s: got %.6g, want %.6g", c.name, c.got, c.want)
		}
	}
}

// Hamed-Rao correction: it never shrinks the variance, leaves white data
// nearly alone, and inflates it for a strongly autocorrelated series (an
// AR(1) with φ = 0.8 built from a fixed sequence; property test, no
// published value).
func TestMannKendallCorrected(t *testing.T) {
	n := 60
	tt := make([]float64, n)
	ar := make([]float64, n)
	state := uint64(12345)
	e := 0.0
	for i := range ar {
		tt[i] = float64(i)
		state = state*6364136223846793005 + 1442695040888963407
		u := float64(state>>11)/(1<<53) - 0.5
		e = 0.8*e + u
		ar[i] = e
	}
	r := MannKendallCorrected(tt, ar)
	if r.VarFactor <= 1.5 {
		t.Errorf("AR(1) φ=0.8: variance factor %.3f, want > 1.5", r.VarFactor)
	}
	plain := MannKendall(ar)
	if r.P < plain.P {
		t.Errorf("corrected p %.4g below uncorrected %.4g", r.P, plain.P)
	}
}

func TestRanksAndMedian(t *testing.T) {
	got := ranks([]float64{3, 1, 3, 2})
	want := []float64{3.5, 1, 3.5, 2}
	for i := range want {
		if got[i] != want[i] {
			t.Fatalf("ranks = %v, want %v", got, want)
		}
	}
	if m := median([]float64{1, 2, 3, 4, 5}); m != 3 {
		t.Errorf("median = %v, want 3", m)
	}
	if m := median([]float64{4, 1, 3, 2}); m != 2.5 {
		t.Errorf("median = %v, want 2.5", m)
	}
}
