package detect

import (
	"fmt"
	"math"
)

// EWMA is the exponentially weighted moving average of standardised data,
//
//	E_i = λ z_i + (1 - λ) E_{i-1},  E_0 = 0,
//
// with fixed (asymptotic) limits ±L sqrt(λ/(2-λ)); it signals when |E_i|
// exceeds the limit. N counts the observations. Not safe for concurrent use.
type EWMA struct {
	Lambda float64 `json:"lambda"`
	Value  float64 `json:"value"`
	N      int     `json:"n"`
}

// Update adds one standardised observation.
func (e *EWMA) Update(z float64) {
	e.Value = e.Lambda*z + (1-e.Lambda)*e.Value
	e.N++
}

// Sigma is the asymptotic standard deviation sqrt(λ/(2-λ)) of the EWMA of
// N(0, 1) data.
func (e *EWMA) Sigma() float64 { return math.Sqrt(e.Lambda / (2 - e.Lambda)) }

// ewmaGrid returns a composite Gauss-Legendre rule on [-c, c] with panels no
// wider than the kernel scale λ, which keeps the Nyström error below 1e-9
// for the λ and L of practical charts.
func ewmaGrid(lambda, c float64) (x, w []float64) {
	panels := int(math.Ceil(2 * c / lambda))
	panels = max(4, min(panels, 40))
	return legendreNodes(-c, c, panels, 8)
}

func checkEWMA(lambda, l float64) {
	if !(lambda > 0 && lambda <= 1) || !(l > 0) || math.IsInf(l, 0) {
		panic(fmt.Sprintf("detect: EWMA with lambda=%v, L=%v out of domain", lambda, l))
	}
}

// EWMAARL returns the zero-start average run length of the two-sided EWMA
// chart with smoothing λ and fixed limits ±c, c = L sqrt(λ/(2-λ)), on data
// z ~ N(delta, 1). The ARL function solves (Crowder 1987)
//
//	L(u) = 1 + (1/λ) ∫_{-c}^{c} L(y) φ((y - (1-λ)u)/λ - delta) dy,
//
// solved by the Nyström method on a composite Gauss-Legendre rule; the ARL is
// L(0).
//
// As for CUSUMARL, the solve is ill-conditioned once the ARL passes about
// 1e12 (it returned negative ARLs from L of about 10 at λ = 0.1). With
// q(L) = Φ(-L + delta/σ) + Φ(-L - delta/σ), σ = sqrt(λ/(2-λ)), the chance
// that the stationary EWMA lies beyond a limit, the Nyström value is used
// while 1/q(L) <= 1e9; beyond, with L0 the limit where 1/q(L0) = 1e9,
//
//	ARL(L) = max(ARL_Nyström(L0), 1/q(L)).
//
// Both terms are lower bounds of the true ARL in practice (the ARL grows
// with L; the union bound P(run length <= n) <= n q(L) holds for the
// zero-start chart, whose variance is below σ², and the ratio ARL q is above
// 1 and falls slowly towards 1 as L grows: 1.21 at L = 6, 1.12 at L = 7 for
// λ = 0.1), so a tail p-value from it errs on the large (conservative) side.
// It panics unless 0 < λ <= 1 and L > 0.
func EWMAARL(lambda, l, delta float64) float64 {
	checkEWMA(lambda, l)
	sigma := math.Sqrt(lambda / (2 - lambda))
	logQ := func(l float64) float64 {
		a := math.Log(stdNormCDF(-l + delta/sigma))
		b := math.Log(stdNormCDF(-l - delta/sigma))
		hi, lo := math.Max(a, b), math.Min(a, b)
		return hi + math.Log1p(math.Exp(lo-hi))
	}
	limit := -math.Log(ewmaReliableARL)
	if logQ(l) >= limit {
		return ewmaNystrom(lambda, l, delta)
	}
	// logQ falls with L; find L0 with logQ(L0) = limit.
	f := func(x float64) float64 { return limit - logQ(x) }
	lo := 0.05
	if f(lo) >= 0 {
		return math.Exp(-logQ(l))
	}
	l0 := bisect(f, lo, l, 1e-9)
	return math.Max(ewmaNystrom(lambda, l0, delta), math.Exp(-logQ(l)))
}

// ewmaReliableARL is the stationary exceedance scale 1/q up to which the
// EWMA Nyström solve is used (its ARL is then at most about 1.5e9).
const ewmaReliableARL = 1e9

// ewmaNystrom is the Nyström solution of Crowder's equation behind EWMAARL.
func ewmaNystrom(lambda, l, delta float64) float64 {
	c := l * math.Sqrt(lambda/(2-lambda))
	x, w := ewmaGrid(lambda, c)
	n := len(x)
	p := make([]float64, n*n)
	for i := 0; i < n; i++ {
		for j := 0; j < n; j++ {
			p[i*n+j] = w[j] / lambda * stdNormPDF((x[j]-(1-lambda)*x[i])/lambda-delta)
		}
	}
	v, ok := solveIMinusP(p, n)
	if !ok {
		return math.Inf(1)
	}
	arl := 1.0
	for j := 0; j < n; j++ {
		arl += w[j] / lambda * stdNormPDF(x[j]/lambda-delta) * v[j]
	}
	return arl
}

// EWMAARLMarkov is the Markov-chain approximation of Lucas & Saccucci (1990):
// [-c, c] is cut into 2m+1 states of equal width, the chain moves from the
// centre of state i to state j with the normal probability of landing in j,
// and the ARL is the entry of (I - P)^{-1} 1 for the centre state. It is an
// independent check on EWMAARL, accurate to 3-4 digits for m >= 100.
func EWMAARLMarkov(lambda, l, delta float64, m int) float64 {
	checkEWMA(lambda, l)
	if m < 1 {
		panic("detect: EWMAARLMarkov needs m >= 1")
	}
	c := l * math.Sqrt(lambda/(2-lambda))
	n := 2*m + 1
	width := 2 * c / float64(n)
	p := make([]float64, n*n)
	for i := 0; i < n; i++ {
		s := -c + (float64(i)+0.5)*width
		for j := 0; j < n; j++ {
			lo := -c + float64(j)*width
			hi := lo + width
			p[i*n+j] = stdNormCDF((hi-(1-lambda)*s)/lambda-delta) - stdNormCDF((lo-(1-lambda)*s)/lambda-delta)
		}
	}
	v, ok := solveIMinusP(p, n)
	if !ok {
		return math.Inf(1)
	}
	return v[m]
}

// EWMALimitForARL returns the limit multiplier L for which the zero-start
// two-sided EWMA with smoothing λ has in-control ARL arl0 (bisection on
// log ARL, to 1e-9). It panics unless 0 < λ <= 1 and arl0 > 1.
func EWMALimitForARL(lambda, arl0 float64) float64 {
	if !(lambda > 0 && lambda <= 1) || !(arl0 > 1) {
		panic(fmt.Sprintf("detect: EWMALimitForARL(lambda=%v, arl0=%v) out of domain", lambda, arl0))
	}
	f := func(l float64) float64 { return math.Log(EWMAARL(lambda, l, 0)) - math.Log(arl0) }
	lo, hi := 0.05, 1.0
	for f(hi) < 0 {
		hi *= 1.5
		if hi > 50 {
			return math.Inf(1)
		}
	}
	if f(lo) > 0 {
		return lo
	}
	return bisect(f, lo, hi, 1e-9)
}

// ewmaTailPValue is the chance that a healthy two-sided EWMA with smoothing λ
// reaches |E| >= a within n observations, from the geometric approximation
// p ≈ 1 - exp(-n / ARL0) with ARL0 the ARL for the limit a (EWMAARL, which
// stays positive for every a), so p lies in [0, 1].
func ewmaTailPValue(lambda, a float64, n int) float64 {
	sigma := math.Sqrt(lambda / (2 - lambda))
	if !(a > 0) || n <= 0 {
		return 1
	}
	return tailPValue(float64(n), EWMAARL(lambda, a/sigma, 0))
}
