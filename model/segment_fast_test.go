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

// TestExtremesWindow checks the two-stack window against a brute-force scan:
// the latest index of the largest and smallest level over the samples whose
// time is within the window, with ties (and -0 == +0) resolved as a
// monotone deque resolves them.
func TestExtremesWindow(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 12))
	levels := []float64{-1, math.Copysign(0, -1), 0, 0.5, 1, 2}
	var w extremes
	var ts []int64
	var ys []float64
	const win = 7
	start := 0 // first index in the window
	var tn int64
	for i := range 5000 {
		if rng.IntN(500) == 0 { // as toQuiet does: start again
			w.reset()
			start = i
		}
		tn += 1 + int64(rng.IntN(3))
		y := levels[rng.IntN(len(levels))]
		ts, ys = append(ts, tn), append(ys, y)
		w.push(i, tn, y)
		for w.oldestT() < tn-win {
			w.popFront()
		}
		for ts[start] < tn-win {
			start++
		}
		wantMax, wantMin := start, start
		for j := start; j <= i; j++ {
			if ys[j] >= ys[wantMax] {
				wantMax = j
			}
			if ys[j] <= ys[wantMin] {
				wantMin = j
			}
		}
		if got := w.argMax(); got != wantMax {
			t.Fatalf("sample %d: argMax got %d, want %d", i, got, wantMax)
		}
		if got := w.argMin(); got != wantMin {
			t.Fatalf("sample %d: argMin got %d, want %d", i, got, wantMin)
		}
		if got, want := w.n(), i-start+1; got != want {
			t.Fatalf("sample %d: n got %d, want %d", i, got, want)
		}
	}
}
