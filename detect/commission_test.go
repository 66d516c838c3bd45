package detect

import (
	"math"
	"testing"
)

// commissionedHistory feeds the simulated tank of history (tau 2 %, fit
// error 0.5 %, 2 drains a day) into a state whose baseline a commissioning
// test over the first testDays days started, and returns the state.
func commissionedHistory(t *testing.T, seed uint64, testDays, endDay float64, mult func(int64) float64) (*State, *simTank) {
	t.Helper()
	s := NewState("c1")
	if err := s.Commission(nsTime(studyStart-1), nsTime(dayNs(testDays))); err != nil {
		t.Fatal(err)
	}
	st := history(t, s, Options{}, seed, endDay, mult, zero)
	return s, st
}

// An accepted commissioning test starts the baseline: the epoch is the
// test's start, its drains are the first baseline drains, and once the
// reference is set the later baseline drains are compared with them by the
// pooled two-sample t statistic, recomputed here from the learned points
// (Student 1908; the pooled form as in any statistics handbook).
func TestCommissionStartsBaseline(t *testing.T) {
	s, st := commissionedHistory(t, 11, 1, 60, one)
	if !s.Ref.Set || s.Ref.Test == nil || s.EpochNs != studyStart-1 || s.LastAction != "commissioned" {
		t.Fatalf("after 60 days: epoch %d, action %q, reference %+v", s.EpochNs, s.LastAction, s.Ref)
	}
	var test, base []float64
	for _, p := range s.Learn {
		if p.TimeNs <= dayNs(1) {
			test = append(test, p.LnK)
		} else {
			base = append(base, p.LnK)
		}
	}
	if len(test) == 0 || s.Learn[0].TimeNs > dayNs(1) {
		t.Fatalf("the test's drains are not the first of the baseline: %d test drains", len(test))
	}
	avg := func(x []float64) float64 {
		var a float64
		for _, v := range x {
			a += v
		}
		return a / float64(len(x))
	}
	mt, mb := avg(test), avg(base)
	var ss float64
	for _, v := range test {
		ss += (v - mt) * (v - mt)
	}
	for _, v := range base {
		ss += (v - mb) * (v - mb)
	}
	dof := len(test) + len(base) - 2
	want := (mb - mt) / math.Sqrt(ss/float64(dof)*(1/float64(len(test))+1/float64(len(base))))
	c := s.Ref.Test
	if c.TestN != len(test) || c.BaseN != len(base) || c.DOF != dof || math.Abs(c.T-want) > 1e-9 {
		t.Errorf("comparison %+v, want t %.6f with %d+%d drains", *c, want, len(test), len(base))
	}
	if fs := s.Evaluate(nsTime(st.tNs), Options{}); len(fs) != 0 {
		t.Errorf("healthy commissioned tank: findings %+v", fs)
	}
	// A later cleaning ends the commissioned baseline.
	if err := s.Reset(nsTime(dayNs(61)), "cleaned"); err != nil {
		t.Fatal(err)
	}
	if s.CommissionUntilNs != 0 || s.Ref.Set {
		t.Errorf("after a cleaning: commissioning until %d, reference %+v", s.CommissionUntilNs, s.Ref)
	}
	if err := s.Commission(nsTime(dayNs(62)), nsTime(dayNs(62))); err == nil {
		t.Error("a test window that ends at its start: got nil error")
	}
}

// What the test adds: an outlet that loses 20 % (10 scatters of 2 %; a
// valve left partly shut) right after a one-drain commissioning test is reported against the test, while a
// baseline of the same drains without the test learns the restricted K as
// normal and stays silent.
func TestCommissionFindsEarlyRestriction(t *testing.T) {
	mult := func(ts int64) float64 {
		if ts > dayNs(1) {
			return 0.80
		}
		return 1
	}
	s, st := commissionedHistory(t, 12, 1, 40, mult)
	fs := s.Evaluate(nsTime(st.tNs), Options{})
	if len(fs) != 1 || fs[0].Kind != KindRestriction || fs[0].Subtype != SubSinceTest || math.Abs(fs[0].MagnitudePct+20) > 4 {
		t.Errorf("commissioned baseline: findings %+v, want one restriction since commissioning of about -20 %%", fs)
	}
	plain := NewState("c2")
	st = history(t, plain, Options{}, 12, 40, mult, zero)
	if fs := plain.Evaluate(nsTime(st.tNs), Options{}); len(fs) != 0 {
		t.Errorf("baseline of the drains alone: %d findings (first %+v), want none", len(fs), fs[0])
	}
}

// The comparison's false-alarm rate: on 2000 healthy tanks commissioned on
// their first day's drains, the share with p below 0.05 is 5 % within
// three binomial standard errors, and those below commissionAlpha (0.001)
// are at most 7, the upper 99.9 % Poisson limit of a mean of 2 (Poisson
// tail, from memory; P(X >= 8 | 2) = 0.0011).
func TestCommissionComparisonFalseAlarm(t *testing.T) {
	const tanks = 2000
	below05, belowAlpha := 0, 0
	for i := range tanks {
		s, _ := commissionedHistory(t, uint64(1000+i), 1, 8, one)
		c := s.Ref.Test
		if c == nil {
			t.Fatalf("tank %d: no comparison after 8 days: %+v", i, s.Ref)
		}
		if c.P < 0.05 {
			below05++
		}
		if c.P < commissionAlpha {
			belowAlpha++
		}
	}
	share := float64(below05) / tanks
	se := math.Sqrt(0.05 * 0.95 / tanks)
	t.Logf("p < 0.05: %.2f %%; p < %g: %d of %d", 100*share, commissionAlpha, belowAlpha, tanks)
	if math.Abs(share-0.05) > 3*se {
		t.Errorf("p < 0.05 on %.2f %% of healthy tanks, want 5 ± %.2f %%", 100*share, 300*se)
	}
	if belowAlpha > 7 {
		t.Errorf("%d of %d healthy tanks below %g, want at most 7", belowAlpha, tanks, commissionAlpha)
	}
}
