package model

import (
	"math"
	"math/rand/v2"
	"testing"
)

// TestMedianBits checks the branch-free block median against median on the
// floats, bit for bit, on hand-made cases and on random blocks of every
// size up to the block cap, continuous and quantised (many ties).
func TestMedianBits(t *testing.T) {
	var e noiseEstimator
	bits := func(x []float64) []uint64 {
		out := make([]uint64, len(x))
		for i, v := range x {
			out[i] = math.Float64bits(v)
		}
		return out
	}
	for _, c := range []struct {
		x    []float64
		want float64
	}{
		{[]float64{3}, 3},
		{[]float64{2, 1}, 1.5},
		{[]float64{0, 5, 1}, 1},
		{[]float64{4, 4, 4, 4}, 4},
		{[]float64{0, 0, 7, 7}, 3.5},
		{[]float64{1, 2, 2, 2, 9}, 2},
		{[]float64{9, 1, 8, 2, 7, 3}, 5},
		{[]float64{0, math.Inf(1), 1}, 1},
	} {
		in := bits(c.x)
		if got := e.medianBits(in); got != c.want {
			t.Errorf("medianBits(%v) = %v, want %v", c.x, got, c.want)
		}
		for i, v := range c.x {
			if in[i] != math.Float64bits(v) {
				t.Errorf("medianBits(%v) changed its input", c.x)
				break
			}
		}
	}
	rng := rand.New(rand.NewPCG(3, 4))
	for n := 1; n <= noiseBlockCap; n++ {
		for _, q := range []float64{0, 1e-3, 0.1} {
			x := make([]float64, n)
			for i := range x {
				v := math.Abs(rng.NormFloat64() * 0.005)
				if q > 0 {
					v = math.Round(v/q) * q
				}
				x[i] = v
			}
			in := bits(x)
			got := e.medianBits(in)
			want := median(append([]float64(nil), x...))
			if math.Float64bits(got) != math.Float64bits(want) {
				t.Fatalf("n=%d q=%g: got %v, want %v", n, q, got, want)
			}
		}
	}
}
