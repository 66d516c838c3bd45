package detect

import (
	"math"
	"testing"

	"drainsight/model"
)

// TestExponentCheck: the reference is the median exponent of the tank's
// drains; the tight allowance and the baseline K only once a baseline of
// the tank's own drains is set; nothing with fewer than three drains.
func TestExponentCheck(t *testing.T) {
	pts := func(ns ...float64) []Point {
		var p []Point
		for _, n := range ns {
			p = append(p, Point{Exp: n})
		}
		return p
	}
	cases := []struct {
		name    string
		s       State
		wantRef float64
		want    model.ExponentCheck
	}{
		{"two drains", State{Learn: pts(0.5, 0.52)}, 0, model.ExponentCheck{}},
		{"learning", State{Learn: pts(0.62, 0.60, 0.9)}, 0.62, model.ExponentCheckRecent},
		{"baseline", State{Learn: pts(0.5, 0.51, 0.49, 0.5, 0.52), Points: pts(0.7),
			Ref: Reference{Set: true, LnK: math.Log(0.004), Tau: 0.01}}, 0.505, model.ExponentCheckBaseline},
		{"design baseline", State{Learn: pts(0.5, 0.51, 0.49, 0.5, 0.52),
			Ref: Reference{Set: true, Design: true, LnK: math.Log(0.004)}}, 0.5, model.ExponentCheckBaseline},
	}
	for _, c := range cases {
		got := c.s.ExponentCheck()
		if got.RefExponent != c.wantRef || got.AllowanceExp != c.want.AllowanceExp || got.ZLimit != c.want.ZLimit {
			t.Errorf("%s: got %+v, want reference %g with %+v", c.name, got, c.wantRef, c.want)
		}
		wantK := c.s.Ref.Set && !c.s.Ref.Design
		if (got.RefLnK != 0) != wantK {
			t.Errorf("%s: baseline K passed %v, want %v", c.name, got.RefLnK != 0, wantK)
		}
	}
}
