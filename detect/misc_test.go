package detect

import (
	"math"
	"testing"
)

// Benjamini & Hochberg (1995), J. R. Stat. Soc. B 57:289-300, Section 3.2:
// the 15 p-values of their worked example; at q* = 0.05 the step-up
// procedure rejects the 4 smallest, where Bonferroni rejects 3 (from memory
// of the paper; the adjusted values below are a hand computation,
// q_(i) = min_{j>=i} 15 p_(j)/j).
func TestBenjaminiHochbergPaperExample(t *testing.T) {
	p := []float64{0.0001, 0.0004, 0.0019, 0.0095, 0.0201, 0.0278, 0.0298, 0.0344, 0.0459, 0.3240, 0.4262, 0.5719, 0.6528, 0.7590, 1.000}
	adj, rej := BenjaminiHochberg(p, 0.05)
	n := 0
	for _, r := range rej {
		if r {
			n++
		}
	}
	if n != 4 {
		t.Errorf("rejections = %d, want 4", n)
	}
	// Hand computation: 15×0.0001/1 = 0.0015; 15×0.0004/2 = 0.003;
	// 15×0.0019/3 = 0.0095; 15×0.0095/4 = 0.035625; rank 5 takes the
	// minimum over j >= 5 of 0.0603, 0.0695, 0.063857, 0.0645, 0.0765, ...
	// which is 0.0603.
	want := []float64{0.0015, 0.003, 0.0095, 0.035625, 0.0603}
	for i, w := range want {
		if math.Abs(adj[i]-w) > 1e-12 {
			t.Errorf("adjusted[%d] = %.6g, want %.6g", i, adj[i], w)
		}
	}
	if adj[14] != 1 {
		t.Errorf("adjusted[14] = %v, want 1", adj[14])
	}
}

func TestBenjaminiHochbergOrderAndNaN(t *testing.T) {
	adj, rej := BenjaminiHochberg([]float64{0.04, math.NaN(), 0.01}, 0.05)
	// sorted 0.01, 0.04, 1: q = 0.03, 0.06, 1 (hand computation)
	want := []float64{0.06, 1, 0.03}
	for i := range want {
		if math.Abs(adj[i]-want[i]) > 1e-12 {
			t.Errorf("adjusted = %v, want %v", adj, want)
		}
	}
	if rej[0] || rej[1] || !rej[2] {
		t.Errorf("reject = %v, want [false false true]", rej)
	}
}

func TestMeanShift(t *testing.T) {
	// Ten zeros then ten threes: the split is at 10 exactly, the gain is
	// 10·10/40 · 9 = 22.5 (hand computation), and the profile interval is
	// one point wide because moving the split by one costs more than 1.92.
	z := make([]float64, 20)
	for i := 10; i < 20; i++ {
		z[i] = 3
	}
	cp := MeanShift(z)
	if cp.Index != 10 || cp.Lo != 10 || cp.Hi != 10 || math.Abs(cp.LLR-22.5) > 1e-12 || math.Abs(cp.Shift-3) > 1e-12 {
		t.Errorf("got %+v, want Index 10 [10,10], LLR 22.5, Shift 3", cp)
	}
	if cp.PValue > 1e-8 {
		t.Errorf("p = %g, want tiny", cp.PValue)
	}
	// No change: the p-value bound is large.
	flat := []float64{0.1, -0.2, 0.3, -0.1, 0.0, 0.2, -0.3, 0.1}
	if got := MeanShift(flat).PValue; got < 0.5 {
		t.Errorf("flat series p = %g, want >= 0.5", got)
	}
}

func TestFitShape(t *testing.T) {
	n := 40
	tt := make([]float64, n)
	step := make([]float64, n)
	ramp := make([]float64, n)
	for i := range tt {
		tt[i] = float64(i)
		if i >= 20 {
			step[i] = 2
			ramp[i] = 0.2 * float64(i-20)
		}
	}
	s := fitShape(tt, step)
	if s.StepGain <= s.RampGain || s.StepIndex != 20 {
		t.Errorf("step data: %+v, want step preferred at 20", s)
	}
	r := fitShape(tt, ramp)
	if r.RampGain <= r.StepGain || r.RampIndex != 20 || math.Abs(r.RampSlope-0.2) > 1e-12 {
		t.Errorf("ramp data: %+v, want ramp preferred at 20 with slope 0.2", r)
	}
}

// TestRoundARLUpOnGrid: the cached limits use an ARL0 never below the one
// asked for (the stated false-alarm rate is an upper bound) and at most one
// grid step (10^(1/20), 12.2 %) above it.
func TestRoundARLUpOnGrid(t *testing.T) {
	for _, x := range []float64{2, 9.99, 10, 123.4, 1000, 1825, 3652.5, 7.3e4, 1e6} {
		got := roundARL(x)
		if got < x*(1-1e-12) || got > x*math.Pow(10, 1.0/20)*(1+1e-12) {
			t.Errorf("roundARL(%g) = %g, want in [x, 1.122 x]", x, got)
		}
		if again := roundARL(got); math.Abs(again/got-1) > 1e-12 {
			t.Errorf("roundARL not idempotent at %g: %g", got, again)
		}
	}
}
