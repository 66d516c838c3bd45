package model

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"
)

func TestMed5Keys(t *testing.T) {
	vals := []float64{-3.5, -1e-300, math.Copysign(0, -1), 0, 1e-300, 2, 2, 7.25, math.Inf(1), math.Inf(-1)}
	rng := rand.New(rand.NewPCG(9, 9))
	for range 2000 {
		var x [5]float64
		for i := range x {
			x[i] = vals[rng.IntN(len(vals))]
		}
		s := x
		slices.Sort(s[:])
		if got, want := med5(x[0], x[1], x[2], x[3], x[4]), s[2]; got != want {
			t.Fatalf("med5%v: got %g, want %g", x, got, want)
		}
	}
	for _, v := range vals {
		if got := unkey(fkey(v)); math.Float64bits(got) != math.Float64bits(v) {
			t.Errorf("unkey(fkey(%g)) = %g", v, got)
		}
	}
}
