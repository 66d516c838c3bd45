package detect

import (
	"math"
	"sync"
)

// Chart limits are pure functions of (k or λ, ARL0) but cost a few
// milliseconds each, so they are memoised. The ARL0 is first rounded up to a
// fixed grid of 20 points per decade, so a result never depends on what was
// cached before, a fleet of tanks with slightly different drain frequencies
// shares a handful of limits, and the false-alarm rate is never more than
// the one asked for (the in-control ARL is at most 12 % longer, which delays
// detection by a fraction of a drain). The cache is safe for concurrent use.
var limitCache = struct {
	sync.Mutex
	m map[[3]float64]float64
}{m: map[[3]float64]float64{}}

// arlGridPerDecade is the density of the ARL0 grid.
const arlGridPerDecade = 20

// roundARL rounds an ARL0 up to the next point 10^(i/20) of the grid.
func roundARL(x float64) float64 {
	if x <= 0 || math.IsInf(x, 0) || math.IsNaN(x) {
		return x
	}
	i := math.Ceil(math.Log10(x)*arlGridPerDecade - 1e-9)
	return math.Pow(10, i/arlGridPerDecade)
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
