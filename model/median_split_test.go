package model

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"
)

// TestMedianSplit checks the branch-free median against the sorted order
// statistics, bit for bit, on hand-made cases and on random samples of
// every size up to 300, continuous and quantised (many ties), with first
// pivots that are absent, in the data, below it and above it; and medianBuf
// on inputs long enough to be bracketed first.
func TestMedianSplit(t *testing.T) {
	for _, c := range []struct {
		x        []float64
		p0       float64
		want, up float64
	}{
		{[]float64{3}, math.NaN(), 3, 3},
		{[]float64{2, 1}, math.NaN(), 1.5, 2},
		{[]float64{0, 5, 1}, 9, 1, 1},
		{[]float64{4, 4, 4, 4}, 4, 4, 4},
		{[]float64{0, 0, 7, 7}, -1, 3.5, 7},
		{[]float64{1, 2, 2, 2, 9}, 2, 2, 2},
		{[]float64{9, 1, 8, 2, 7, 3}, 5, 5, 7},
		{[]float64{0, math.Inf(1), 1}, math.NaN(), 1, 1},
		{[]float64{-3, -1, -2, 5}, 0, -1.5, -1},
	} {
		x := slices.Clone(c.x)
		got, up := medianSplit(x, make([]float64, len(x)), c.p0)
		if got != c.want || up != c.up {
			t.Errorf("medianSplit(%v, p0 %v) = %v, %v, want %v, %v", c.x, c.p0, got, up, c.want, c.up)
		}
	}
	rng := rand.New(rand.NewPCG(3, 4))
	for n := 1; n <= 300; n++ {
		for _, q := range []float64{0, 1e-3, 0.1} {
			x := make([]float64, n)
			for i := range x {
				v := rng.NormFloat64() * 0.005
				if q > 0 {
					v = math.Round(v/q) * q
				}
				x[i] = math.Abs(v) // no -0, as the callers
			}
			s := slices.Clone(x)
			slices.Sort(s)
			want, up := s[n/2], s[n/2]
			if n%2 == 0 {
				want = 0.5 * (s[n/2-1] + s[n/2])
			}
			for _, p0 := range []float64{math.NaN(), s[rng.IntN(n)], -1, 1, s[n/2]} {
				got, gup := medianSplit(slices.Clone(x), make([]float64, n), p0)
				if math.Float64bits(got) != math.Float64bits(want) || gup != up {
					t.Fatalf("n=%d q=%g p0=%v: got %v, %v, want %v, %v", n, q, p0, got, gup, want, up)
				}
			}
			if got := medianBuf(slices.Clone(x), make([]float64, n)); got != want {
				t.Fatalf("medianBuf n=%d q=%g: got %v, want %v", n, q, got, want)
			}
		}
	}
	// long inputs take the bracketing path, with its selections on buf
	for _, n := range []int{bracketMinN, 5001, 20000, 86401} {
		for _, q := range []float64{0, 1e-3} {
			x := make([]float64, n)
			for i := range x {
				v := rng.NormFloat64() * 0.005
				if q > 0 {
					v = math.Round(v/q) * q
				}
				x[i] = math.Abs(v)
			}
			s := slices.Clone(x)
			slices.Sort(s)
			want := s[n/2]
			if n%2 == 0 {
				want = 0.5 * (s[n/2-1] + s[n/2])
			}
			if got := medianBuf(x, make([]float64, n)); got != want {
				t.Fatalf("medianBuf n=%d q=%g: got %v, want %v", n, q, got, want)
			}
		}
	}
}
