package detect

import (
	"math"
	"sort"
)

// BenjaminiHochberg applies the step-up procedure of Benjamini & Hochberg
// (1995), J. R. Stat. Soc. B 57:289-300, to the p-values p at false discovery
// rate alpha. With the p-values sorted, p_(1) <= ... <= p_(m), it rejects
// H_(1..k) for the largest k with p_(k) <= k alpha / m. adjusted holds the
// BH-adjusted p-values (q-values) in the input order,
//
//	q_(i) = min_{j >= i} min(1, m p_(j) / j),
//
// and reject[i] is q_i <= alpha. NaN p-values are treated as 1, and a value
// outside [0, 1] (a caller's bug, never produced by this package) is clamped
// to it, so every q-value lies in [0, 1].
func BenjaminiHochberg(p []float64, alpha float64) (adjusted []float64, reject []bool) {
	m := len(p)
	adjusted = make([]float64, m)
	reject = make([]bool, m)
	if m == 0 {
		return adjusted, reject
	}
	idx := make([]int, m)
	for i := range idx {
		idx[i] = i
	}
	val := func(i int) float64 {
		if math.IsNaN(p[i]) {
			return 1
		}
		return math.Min(1, math.Max(0, p[i]))
	}
	sort.SliceStable(idx, func(a, b int) bool { return val(idx[a]) < val(idx[b]) })
	run := 1.0
	for r := m - 1; r >= 0; r-- {
		q := math.Min(1, val(idx[r])*float64(m)/float64(r+1))
		run = math.Min(run, q)
		adjusted[idx[r]] = run
	}
	for i, q := range adjusted {
		reject[i] = q <= alpha
	}
	return adjusted, reject
}
