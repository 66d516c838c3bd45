package detect

import (
	"math"
	"testing"
	"time"
)

// TestTailPValuesInUnitInterval is a property test: for chart values from 0
// to far beyond any limit and for 1 to 10^6 observations, every tail p-value
// lies in [0, 1], falls (weakly) as the chart value grows and rises (weakly)
// with the number of observations. Before the ARL extension the Nyström
// solves returned negative ARLs for CUSUM values above about 40 and EWMA
// limits above about 10 sd, and so negative p-values.
func TestTailPValuesInUnitInterval(t *testing.T) {
	ns := []int{1, 10, 100, 1000, 10000, 1000000}
	check := func(name string, f func(c float64, n int) float64, cs []float64) {
		t.Helper()
		grid := make([][]float64, len(cs))
		for i, c := range cs {
			grid[i] = make([]float64, len(ns))
			for j, n := range ns {
				p := f(c, n)
				grid[i][j] = p
				if !(p >= 0 && p <= 1) {
					t.Errorf("%s(c=%g, n=%d) = %g, want in [0, 1]", name, c, n, p)
				}
				if i > 0 && p > grid[i-1][j]*(1+1e-6)+1e-300 {
					t.Errorf("%s(c=%g, n=%d) = %g rose above %g at the smaller c", name, c, n, p, grid[i-1][j])
				}
				if j > 0 && p < grid[i][j-1]*(1-1e-9) {
					t.Errorf("%s(c=%g, n=%d) = %g fell below %g at the smaller n", name, c, n, p, grid[i][j-1])
				}
			}
		}
	}
	var cs []float64
	for c := 0.0; c <= 1200; c += 1 + c/5 {
		cs = append(cs, c)
	}
	for _, k := range []float64{0.25, 0.5, 1} {
		check("cusumTailPValue", func(c float64, n int) float64 { return cusumTailPValue(k, c, n) }, cs)
	}
	check("leakTailPValue", leakTailPValue, cs)
	var as []float64
	for a := 0.0; a <= zClip; a += 0.2 {
		as = append(as, a)
	}
	for _, lambda := range []float64{0.1, 0.2} {
		check("ewmaTailPValue", func(a float64, n int) float64 { return ewmaTailPValue(lambda, a, n) }, as)
	}
}

// TestARLExtension checks the large-limit ARLs against Siegmund's
// approximation: in the reliable range the ratio Nyström/Siegmund is
// constant to 1e-4 from h = 10 on (computed here), and the extension keeps
// that ratio, so ARL/Siegmund at h = 15 (solved) and h = 40, 100, 300
// (extended) agree; before, the solve gave negative ARLs at h = 40.
func TestARLExtension(t *testing.T) {
	for _, k := range []float64{0.25, 0.5, 1} {
		ref := CUSUMARL(k, 10, 0, 0) / SiegmundARL(k, 10, 0)
		for _, h := range []float64{15, 40, 100, 300} {
			got := math.Exp(math.Log(CUSUMARL(k, h, 0, 0)) - logSiegmundARL(k, h, 0))
			if math.Abs(got/ref-1) > 1e-3 {
				t.Errorf("k=%g h=%g: ARL/Siegmund = %.6f, want %.6f", k, h, got, ref)
			}
		}
	}
	// The lower side of a two-sided chart under a large upward shift: the
	// ARL is astronomically large and must not spoil the combined ARL.
	got := CUSUMARLTwoSided(0.5, 8.8, 3, 0)
	want := CUSUMARL(0.5, 8.8, 3, 0)
	if relErr(got, want) > 1e-9 {
		t.Errorf("two-sided ARL at delta 3 = %g, want the upper side's %g", got, want)
	}
	// EWMA: the extension is continuous at the switch and grows with L.
	prev := 0.0
	for l := 5.0; l <= 17; l += 0.25 {
		a := EWMAARL(0.1, l, 0)
		if !(a > prev) {
			t.Errorf("EWMAARL(0.1, %g) = %g, not above %g", l, a, prev)
		}
		prev = a
	}
}

// TestDemoLikePValues replays the demo's situation: a tank that lost 35 %
// of its K months ago (CUSUM in the hundreds) and a tank with a strong leak;
// their findings and the fleet q-values must be probabilities.
func TestDemoLikePValues(t *testing.T) {
	onset := dayNs(40)
	restricted := NewState("r")
	mult := func(ts int64) float64 {
		if ts >= onset {
			return 0.65
		}
		return 1
	}
	st := history(t, restricted, Options{}, 11, 200, mult, zero)
	leaking := NewState("l")
	leak := func(ts int64) float64 {
		if ts >= onset {
			return 3e-4
		}
		return 0
	}
	history(t, leaking, Options{}, 12, 200, one, leak)
	healthy := NewState("h")
	history(t, healthy, Options{}, 13, 200, one, zero)
	now := nsTime(st.tNs)
	if restricted.CUSUM.Lo < 200 {
		t.Fatalf("restricted tank's lower CUSUM %.1f, want in the hundreds for this test", restricted.CUSUM.Lo)
	}
	for _, s := range []*State{restricted, leaking} {
		fs := s.Evaluate(now, Options{})
		if len(fs) == 0 {
			t.Fatalf("%s: no finding", s.Tank)
		}
		for _, f := range fs {
			if !(f.PValue >= 0 && f.PValue <= 1) {
				t.Errorf("%s %s: p = %g, want in [0, 1] (%s %.1f)", s.Tank, f.Kind, f.PValue, f.Statistic, f.Value)
			}
		}
	}
	for _, r := range RankFleet([]*State{restricted, leaking, healthy}, now, Options{}, 0.05) {
		if !(r.PValue >= 0 && r.PValue <= 1) || !(r.QValue >= 0 && r.QValue <= 1) {
			t.Errorf("%s: p = %g, q = %g, want both in [0, 1]", r.Tank, r.PValue, r.QValue)
		}
		if got, want := r.Watch, r.Tank != "h"; got != want {
			t.Errorf("%s: watch = %v, want %v (p = %g, q = %g)", r.Tank, got, want, r.PValue, r.QValue)
		}
	}
	_ = time.Hour
}
