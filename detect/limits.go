package detect

import (
	"math"
	"sync"
)

// Chart limits are pure functions of (k or λ, ARL0) but cost a few
// milliseconds each, so they are memoised. The ARL0 is rounded to two
// significant digits first, so a result never depends on what was cached
// before. The cache is safe for concurrent use.
var limitCache = struct {
	sync.Mutex
	m map[[3]float64]float64
}{m: map[[3]float64]float64{}}

// roundARL rounds an ARL0 to two significant digits (at most 5 % away), so
// that the drain frequency's day-to-day wobble does not recompute limits.
func roundARL(x float64) float64 {
	if x <= 0 || math.IsInf(x, 0) || math.IsNaN(x) {
		return x
	}
	p := math.Pow(10, 1-math.Floor(math.Log10(x)))
	return math.Round(x*p) / p
}

func cachedLimit(kind, param, arl0 float64, f func(param, arl0 float64) float64) float64 {
	arl0 = roundARL(arl0)
	key := [3]float64{kind, param, arl0}
	limitCache.Lock()
	v, ok := limitCache.m[key]
	limitCache.Unlock()
	if ok {
		return v
	}
	v = f(param, arl0)
	limitCache.Lock()
	limitCache.m[key] = v
	limitCache.Unlock()
	return v
}

// cusumH is ThresholdForARL with memoisation.
func cusumH(k, arl0 float64) float64 { return cachedLimit(1, k, arl0, ThresholdForARL) }

// ewmaL is EWMALimitForARL with memoisation.
func ewmaL(lambda, arl0 float64) float64 {
	return cachedLimit(2, lambda, math.Max(arl0, 2), EWMALimitForARL)
}

// leakH is the decision interval of the one-sided (upper) CUSUM on leak
// scores with in-control ARL arl0, memoised.
func leakH(k, arl0 float64) float64 {
	return cachedLimit(3, k, arl0, func(k, arl0 float64) float64 {
		f := func(h float64) float64 { return math.Log(CUSUMARL(k, h, 0, 0)) - math.Log(arl0) }
		if f(0) >= 0 {
			return 0
		}
		hi := 1.0
		for f(hi) < 0 {
			hi *= 2
		}
		return bisect(f, 0, hi, 1e-9)
	})
}
