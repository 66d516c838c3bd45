package detect

import (
	"fmt"
	"math"
)

// CUSUM is the two-sided tabular CUSUM on standardised data z ~ N(δ, 1):
//
//	C+_i = max(0, C+_{i-1} + z_i - k),  C-_i = max(0, C-_{i-1} - z_i - k)
//
// It signals when either statistic exceeds the decision interval h. K is the
// reference value (half the shift, in standard deviations, that the chart is
// tuned to). Hi and Lo are the upper and lower statistics; HiRun and LoRun
// count the observations since each last left zero (so the change is
// estimated to have begun HiRun observations ago, Page's estimate).
//
// The zero value is a chart with k = 0 started at zero. Not safe for
// concurrent use.
type CUSUM struct {
	K     float64 `json:"k"`
	Hi    float64 `json:"hi"`
	Lo    float64 `json:"lo"`
	HiRun int     `json:"hi_run"`
	LoRun int     `json:"lo_run"`
}

// Update adds one standardised observation.
func (c *CUSUM) Update(z float64) {
	c.Hi = math.Max(0, c.Hi+z-c.K)
	c.Lo = math.Max(0, c.Lo-z-c.K)
	if c.Hi > 0 {
		c.HiRun++
	} else {
		c.HiRun = 0
	}
	if c.Lo > 0 {
		c.LoRun++
	} else {
		c.LoRun = 0
	}
}

// Reset restarts both sides at the head start s (0 for a standard chart, h/2
// for the fast initial response of Lucas & Crosier 1982).
func (c *CUSUM) Reset(s float64) { c.Hi, c.Lo, c.HiRun, c.LoRun = s, s, 0, 0 }

// cusumNodes is the Gauss-Legendre order of the Nyström solution; 64 nodes
// agree with 128 to about 1e-10 for h <= 10 (checked in the tests).
const cusumNodes = 64

// CUSUMARL returns the average run length of the one-sided upper CUSUM
// C_i = max(0, C_{i-1} + z_i - k), z ~ N(delta, 1), started at headStart and
// signalling when C_i > h. The count includes the signalling observation.
//
// The ARL function L(u) of the start value u solves the integral equation of
// Page (1954):
//
//	L(u) = 1 + L(0) Φ(k - u - delta) + ∫_0^h L(x) φ(x + k - u - delta) dx
//
// (Φ(k - u - delta) is the chance of falling back to zero), solved by the
// Nyström method on a 64-point Gauss-Legendre rule (h <= 32; a composite
// rule of 8 nodes per unit of h beyond, at most 512 nodes), which converges
// exponentially because the normal kernel is smooth. For the lower chart use
// delta -> -delta.
//
// The linear system I - P has a condition number of the order of the ARL,
// so in double precision the solve loses all digits once the ARL passes
// about 1e12 (it returned negative ARLs, and negative tail p-values, for
// h of 40 and more at k = 0.5). Where Siegmund's approximation exceeds
// cusumReliableARL (1e10) the ARL is extended from the largest reliable
// interval h0 by Siegmund's exponential growth,
//
//	ARL(h) = ARL_Nyström(h0) × S(h) / S(h0),  S = SiegmundARL,
//
// which is accurate to the ratio's drift (the ratio ARL/S is constant to
// 1e-3 beyond h of about 5; see TestCUSUMARLExtension). A head start u is
// carried over as the same distance below the limit: the factor
// ARL_Nyström(h0, max(0, u - (h - h0))) / ARL_Nyström(h0, 0). The result is
// +Inf when it overflows. It panics if k, h or headStart is NaN, h < 0 or
// headStart is outside [0, h].
func CUSUMARL(k, h, delta, headStart float64) float64 {
	if math.IsNaN(k) || math.IsNaN(h) || math.IsNaN(delta) || h < 0 || headStart < 0 || headStart > h {
		panic(fmt.Sprintf("detect: CUSUMARL(k=%v, h=%v, delta=%v, headStart=%v) out of domain", k, h, delta, headStart))
	}
	if math.IsInf(h, 1) {
		return math.Inf(1)
	}
	if h == 0 {
		// Signals as soon as C > 0: a geometric run length.
		return 1 / (1 - stdNormCDF(k-delta))
	}
	if logSiegmundARL(k, h, delta) <= math.Log(cusumReliableARL) {
		return cusumNystrom(k, h, delta, headStart)
	}
	// Largest h0 with Siegmund's ARL at the reliable limit (the log ARL is
	// increasing in h).
	f := func(x float64) float64 { return logSiegmundARL(k, x, delta) - math.Log(cusumReliableARL) }
	h0 := 0.0
	if f(0) < 0 {
		h0 = bisect(f, 0, h, 1e-9)
	}
	// At h0 = 0 (delta far below k) the run length is geometric and exact.
	base := 1 / stdNormCDF(delta-k)
	if h0 > 0 {
		base = cusumNystrom(k, h0, delta, 0)
	}
	arl := base * math.Exp(logSiegmundARL(k, h, delta)-logSiegmundARL(k, h0, delta))
	if headStart > 0 && h0 > 0 {
		arl *= cusumNystrom(k, h0, delta, math.Max(0, headStart-(h-h0))) / base
	}
	return arl
}

// cusumReliableARL is the largest ARL that the Nyström solve of CUSUMARL
// and EWMAARL is trusted to (relative error about ARL × 1e-16 from the
// conditioning of I - P, so 1e-6 here).
const cusumReliableARL = 1e10

// logSiegmundARL is the logarithm of SiegmundARL, computed without overflow
// for large h.
func logSiegmundARL(k, h, delta float64) float64 {
	d := delta - k
	b := h + 1.166
	x := -2 * d * b
	switch {
	case math.Abs(d) < 1e-9:
		return 2 * math.Log(b)
	case x > 30:
		// exp(x) dominates: log(exp(x) (1 + (-x - 1) exp(-x))) - log(2 d²).
		return x + math.Log1p((-x-1)*math.Exp(-x)) - math.Log(2*d*d)
	}
	return math.Log((math.Exp(x) - x - 1) / (2 * d * d))
}

// cusumNystrom is the Nyström solution of Page's equation behind CUSUMARL.
func cusumNystrom(k, h, delta, headStart float64) float64 {
	var x, w []float64
	if h <= 32 {
		x, w = legendreNodes(0, h, 1, cusumNodes)
	} else {
		panels := min(64, int(math.Ceil(h)))
		x, w = legendreNodes(0, h, panels, 8)
	}
	m := len(x)
	n := m + 1 // index 0 is u = 0, then the nodes
	pts := make([]float64, n)
	copy(pts[1:], x)
	p := make([]float64, n*n)
	for i := 0; i < n; i++ {
		u := pts[i]
		p[i*n] = stdNormCDF(k - u - delta)
		for j := 1; j < n; j++ {
			p[i*n+j] = w[j-1] * stdNormPDF(pts[j]+k-u-delta)
		}
	}
	v, ok := solveIMinusP(p, n)
	if !ok {
		return math.Inf(1)
	}
	if headStart == 0 {
		return v[0]
	}
	l := 1 + stdNormCDF(k-headStart-delta)*v[0]
	for j := 1; j < n; j++ {
		l += w[j-1] * stdNormPDF(pts[j]+k-headStart-delta) * v[j]
	}
	return l
}

// CUSUMARLTwoSided returns the ARL of the two-sided chart (upper and lower
// charts with the same k, h and head start) by the combination rule
//
//	1/ARL = 1/ARL+ + 1/ARL-
//
// of van Dobben de Bruyn (1968) as used by Lucas & Crosier (1982). It is exact
// for zero-start charts in the usual range (k >= 0) and a close approximation
// with a head start.
func CUSUMARLTwoSided(k, h, delta, headStart float64) float64 {
	up := CUSUMARL(k, h, delta, headStart)
	lo := CUSUMARL(k, h, -delta, headStart)
	return 1 / (1/up + 1/lo)
}

// CUSUMARLMarkov is the Markov-chain approximation of Brook & Evans (1972) to
// the one-sided upper CUSUM ARL: [0, h] is cut into states 0 (the atom at
// zero, width w/2) and 1..m-1 (width w, centred at i w), w = 2h/(2m-1), and
// the ARL vector solves (I - P) L = 1. It converges like O(1/m^2); m of a few
// hundred gives three to four significant digits. It is kept as an
// independent check on CUSUMARL. It panics if m < 2.
func CUSUMARLMarkov(k, h, delta, headStart float64, m int) float64 {
	if m < 2 {
		panic("detect: CUSUMARLMarkov needs m >= 2 states")
	}
	w := 2 * h / float64(2*m-1)
	p := make([]float64, m*m)
	for i := 0; i < m; i++ {
		c := float64(i) * w
		p[i*m] = stdNormCDF(w/2 - c + k - delta)
		for j := 1; j < m; j++ {
			hiEdge := (float64(j)+0.5)*w - c + k - delta
			loEdge := (float64(j)-0.5)*w - c + k - delta
			p[i*m+j] = stdNormCDF(hiEdge) - stdNormCDF(loEdge)
		}
	}
	v, ok := solveIMinusP(p, m)
	if !ok {
		return math.Inf(1)
	}
	s := int(math.Round(headStart / w))
	if s >= m {
		s = m - 1
	}
	return v[s]
}

// SiegmundARL is Siegmund's (1985) approximation to the one-sided upper CUSUM
// ARL for z ~ N(delta, 1):
//
//	ARL = [exp(-2 D b) + 2 D b - 1] / (2 D^2),  D = delta - k,  b = h + 1.166
//
// and b^2 when D = 0. It is within about 1 % of the exact value for
// delta <= 1 and low by 10-15 % for delta >= 3.
func SiegmundARL(k, h, delta float64) float64 {
	d := delta - k
	b := h + 1.166
	if math.Abs(d) < 1e-9 {
		return b * b
	}
	return (math.Exp(-2*d*b) + 2*d*b - 1) / (2 * d * d)
}

// SiegmundARLTwoSided combines the upper and lower Siegmund approximations
// with 1/ARL = 1/ARL+ + 1/ARL-.
func SiegmundARLTwoSided(k, h, delta float64) float64 {
	return 1 / (1/SiegmundARL(k, h, delta) + 1/SiegmundARL(k, h, -delta))
}

// ThresholdForARL returns the decision interval h of a zero-start two-sided
// CUSUM with reference value k whose in-control ARL (delta = 0) equals arl0
// observations. With arl0 = (false-alarm interval in years) × (drains per
// year), the chart gives on average one false alarm per that many years.
// It solves CUSUMARLTwoSided(k, h, 0, 0) = arl0 by bisection on h to 1e-9.
// It returns 0 when arl0 <= the ARL at h = 0 and panics on NaN or k < 0.
func ThresholdForARL(k, arl0 float64) float64 {
	if math.IsNaN(k) || math.IsNaN(arl0) || k < 0 {
		panic(fmt.Sprintf("detect: ThresholdForARL(k=%v, arl0=%v) out of domain", k, arl0))
	}
	f := func(h float64) float64 { return math.Log(CUSUMARLTwoSided(k, h, 0, 0)) - math.Log(arl0) }
	if f(0) >= 0 {
		return 0
	}
	hi := 1.0
	for f(hi) < 0 {
		hi *= 2
		if hi > 1e3 {
			return math.Inf(1)
		}
	}
	return bisect(f, 0, hi, 1e-9)
}

// cusumTailPValue is the chance that a healthy (in-control) two-sided CUSUM
// with reference k reaches the value c within n observations, from the
// geometric approximation to the run-length distribution:
//
//	p ≈ 1 - exp(-n / ARL0(k, c))
//
// It turns a CUSUM statistic into a p-value for ranking tanks. ARL0 >= 1
// (CUSUMARL stays positive for every c, see there), so p lies in [0, 1]; it
// underflows to 0 once ARL0 exceeds about 1e308 n (c of several hundred).
func cusumTailPValue(k, c float64, n int) float64 {
	if !(c > 0) || n <= 0 {
		return 1
	}
	return tailPValue(float64(n), CUSUMARLTwoSided(k, c, 0, 0))
}

// tailPValue is 1 - exp(-n/arl), the geometric run-length chance of a signal
// within n observations. The final clamp to [0, 1] only guards against a
// non-finite or sub-1 ARL from a failed solve; the ARL functions themselves
// stay in range.
func tailPValue(n, arl float64) float64 {
	if math.IsNaN(arl) || arl <= 0 {
		return 1
	}
	p := -math.Expm1(-n / arl)
	return math.Min(1, math.Max(0, p))
}
