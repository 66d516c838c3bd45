package detect

import (
	"math"
	"slices"
	"sort"
)

// MKResult is the outcome of a Mann-Kendall trend test.
//
// S = Σ_{i<j} sgn(x_j - x_i); VarS is its variance under no trend with the tie
// correction, [n(n-1)(2n+5) - Σ_g t_g(t_g-1)(2t_g+5)]/18 over tie groups of
// size t_g, multiplied by the serial-correlation factor VarFactor (1 when not
// corrected). Z is the continuity-corrected normal score (S∓1)/sqrt(VarS), P
// the two-sided p-value 2(1 - Φ(|Z|)), Tau = S/(n(n-1)/2) Kendall's tau.
type MKResult struct {
	N         int
	S         float64
	VarS      float64
	VarFactor float64
	Z         float64
	P         float64
	Tau       float64
}

// MannKendall tests x (in time order) for a monotonic trend without a
// correction for serial correlation. With fewer than 3 values it returns
// P = 1.
func MannKendall(x []float64) MKResult {
	n := len(x)
	r := MKResult{N: n, VarFactor: 1, P: 1}
	if n < 3 {
		return r
	}
	for i := 0; i < n; i++ {
		for j := i + 1; j < n; j++ {
			r.S += sgn(x[j] - x[i])
		}
	}
	r.VarS = mkVariance(x)
	r.Tau = r.S / (float64(n*(n-1)) / 2)
	r.Z, r.P = mkScore(r.S, r.VarS)
	return r
}

// MannKendallCorrected is the Mann-Kendall test with the variance of S
// inflated for serial correlation after Hamed & Rao (1998), J. Hydrol.
// 204:182-196: the series is detrended with the Theil-Sen slope against t, its
// ranks R_i are formed, the lag-k autocorrelations ρ_k of the ranks that are
// significant at 5 % (|ρ_k| > 1.96/sqrt(n)) enter
//
//	n/n* = 1 + 2/(n(n-1)(n-2)) Σ_{k=1}^{n-1} (n-k)(n-k-1)(n-k-2) ρ_k,
//
// and VarS* = VarS × n/n*. The factor is kept at 1 or more (the correction
// only ever makes the test more cautious).
func MannKendallCorrected(t, x []float64) MKResult {
	r := MannKendall(x)
	n := len(x)
	if n < 5 {
		return r
	}
	ts := TheilSen(t, x, 0.95)
	resid := make([]float64, n)
	for i := range x {
		resid[i] = x[i] - ts.Slope*t[i]
	}
	rank := ranks(resid)
	mean := (float64(n) + 1) / 2
	var den float64
	for _, v := range rank {
		den += (v - mean) * (v - mean)
	}
	if den == 0 {
		return r
	}
	bound := 1.959963984540054 / math.Sqrt(float64(n))
	sum := 0.0
	for k := 1; k < n-2; k++ {
		var num float64
		for i := 0; i+k < n; i++ {
			num += (rank[i] - mean) * (rank[i+k] - mean)
		}
		rho := num / den
		if math.Abs(rho) > bound {
			nk := float64(n - k)
			sum += nk * (nk - 1) * (nk - 2) * rho
		}
	}
	nf := float64(n)
	factor := 1 + 2*sum/(nf*(nf-1)*(nf-2))
	factor = math.Max(1, factor)
	r.VarFactor = factor
	r.VarS *= factor
	r.Z, r.P = mkScore(r.S, r.VarS)
	return r
}

func sgn(v float64) float64 {
	switch {
	case v > 0:
		return 1
	case v < 0:
		return -1
	}
	return 0
}

func mkVariance(x []float64) float64 {
	n := float64(len(x))
	v := n * (n - 1) * (2*n + 5)
	s := slices.Clone(x)
	slices.Sort(s)
	for i := 0; i < len(s); {
		j := i
		for j < len(s) && s[j] == s[i] {
			j++
		}
		if g := float64(j - i); g > 1 {
			v -= g * (g - 1) * (2*g + 5)
		}
		i = j
	}
	return v / 18
}

func mkScore(s, varS float64) (z, p float64) {
	if varS <= 0 {
		return 0, 1
	}
	switch {
	case s > 0:
		z = (s - 1) / math.Sqrt(varS)
	case s < 0:
		z = (s + 1) / math.Sqrt(varS)
	}
	return z, math.Erfc(math.Abs(z) / math.Sqrt2)
}

// ranks returns mid-ranks (1-based; ties share the mean rank).
func ranks(x []float64) []float64 {
	idx := make([]int, len(x))
	for i := range idx {
		idx[i] = i
	}
	sort.SliceStable(idx, func(a, b int) bool { return x[idx[a]] < x[idx[b]] })
	r := make([]float64, len(x))
	for i := 0; i < len(idx); {
		j := i
		for j < len(idx) && x[idx[j]] == x[idx[i]] {
			j++
		}
		mid := float64(i+j+1) / 2
		for q := i; q < j; q++ {
			r[idx[q]] = mid
		}
		i = j
	}
	return r
}

// TheilSenResult is a Theil-Sen line y = Intercept + Slope t with the
// confidence interval [Lo, Hi] of the slope.
type TheilSenResult struct {
	Slope, Intercept float64
	Lo, Hi           float64
	Pairs            int // number of pairs with distinct t
}

// TheilSen returns the median of the pairwise slopes (y_j - y_i)/(t_j - t_i)
// over i < j with t_j ≠ t_i (Sen 1968), the intercept of Conover (1980),
// median(y) - Slope × median(t), and the distribution-free confidence interval
// of Gilbert (1987, ch. 16): with N' ordered slopes and
// C = z_{1-α/2} sqrt(VarS) (VarS the tie-corrected Mann-Kendall variance),
// the limits are the slopes of rank M1 = (N' - C)/2 and M2 + 1 =
// (N' + C)/2 + 1, interpolated linearly between neighbouring ranks when the
// ranks are not whole. conf is the confidence level, e.g. 0.95. With fewer
// than two distinct times every field is NaN.
func TheilSen(t, y []float64, conf float64) TheilSenResult {
	nan := math.NaN()
	res := TheilSenResult{nan, nan, nan, nan, 0}
	n := len(y)
	slopes := make([]float64, 0, n*(n-1)/2)
	for i := 0; i < n; i++ {
		for j := i + 1; j < n; j++ {
			if dt := t[j] - t[i]; dt != 0 {
				slopes = append(slopes, (y[j]-y[i])/dt)
			}
		}
	}
	if len(slopes) == 0 {
		return res
	}
	slices.Sort(slopes)
	res.Pairs = len(slopes)
	res.Slope = median(slopes)
	res.Intercept = median(y) - res.Slope*median(t)
	zq := normQuantile(0.5 + conf/2)
	c := zq * math.Sqrt(mkVariance(y))
	np := float64(len(slopes))
	res.Lo = interpRank(slopes, (np-c)/2)
	res.Hi = interpRank(slopes, (np+c)/2+1)
	return res
}

// interpRank returns the value at 1-based rank r of sorted s, linearly
// interpolated and clamped to the ends.
func interpRank(s []float64, r float64) float64 {
	if r <= 1 {
		return s[0]
	}
	if r >= float64(len(s)) {
		return s[len(s)-1]
	}
	i := int(math.Floor(r))
	f := r - float64(i)
	return s[i-1] + f*(s[i]-s[i-1])
}

// median returns the median of x (the mean of the two middle values for an
// even count); NaN for an empty slice. x is not modified.
func median(x []float64) float64 {
	if len(x) == 0 {
		return math.NaN()
	}
	s := slices.Clone(x)
	slices.Sort(s)
	n := len(s)
	if n%2 == 1 {
		return s[n/2]
	}
	return 0.5 * (s[n/2-1] + s[n/2])
}

// normQuantile is Φ^{-1}(p).
func normQuantile(p float64) float64 { return -math.Sqrt2 * math.Erfcinv(2*p) }
