package model

import (
	"math"
	"math/rand/v2"
	"slices"
	"strconv"
	"testing"
)

// TestMedianInPlaceLarge checks the bracketing path of medianInPlace
// against a full sort, on data whose strided sample is representative and
// on data built to make the bracket miss (the fallback path), and that x
// stays a permutation of its input.
func TestMedianInPlaceLarge(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	gens := map[string]func(i, n int) float64{
		"uniform":  func(int, int) float64 { return rng.Float64() },
		"ties":     func(int, int) float64 { return math.Floor(rng.Float64() * 5) },
		"sorted":   func(i, _ int) float64 { return float64(i) },
		"reversed": func(i, n int) float64 { return float64(n - i) },
		"gaussian": func(int, int) float64 { return math.Abs(rng.NormFloat64()) },
		// every sampled position holds a small value: the bracket misses
		"adversarial": func(i, n int) float64 {
			m := min(1024, 4*int(math.Sqrt(float64(n))))
			if stride := n / m; i < m || (i%stride == 0 && i/stride < m) {
				return -1
			}
			return float64(i % 7)
		},
	}
	for name, gen := range gens {
		for _, n := range []int{bracketMinN, bracketMinN + 1, 5000, 86401} {
			t.Run(name+"/"+strconv.Itoa(n), func(t *testing.T) {
				x := make([]float64, n)
				for i := range x {
					x[i] = gen(i, n)
				}
				s := slices.Clone(x)
				slices.Sort(s)
				want := s[n/2]
				if n%2 == 0 {
					want = 0.5 * (s[n/2-1] + s[n/2])
				}
				if got := medianInPlace(x); got != want {
					t.Errorf("got %g, want %g", got, want)
				}
				slices.Sort(x)
				if !slices.Equal(x, s) {
					t.Errorf("x is no longer a permutation of its input")
				}
			})
		}
	}
}

func BenchmarkMedianInPlace(b *testing.B) {
	rng := rand.New(rand.NewPCG(5, 6))
	src := make([]float64, 86400)
	for i := range src {
		src[i] = math.Abs(rng.NormFloat64())
	}
	x := make([]float64, len(src))
	for b.Loop() {
		copy(x, src)
		medianInPlace(x)
	}
	b.ReportMetric(float64(len(src))*float64(b.N)/b.Elapsed().Seconds(), "values/s")
}
