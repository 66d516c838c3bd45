package detect

import (
	"math"

	"gonum.org/v1/gonum/integrate/quad"
	"gonum.org/v1/gonum/mat"
)

// stdNormCDF is the standard normal distribution function Φ.
func stdNormCDF(x float64) float64 { return 0.5 * math.Erfc(-x/math.Sqrt2) }

// stdNormPDF is the standard normal density φ.
func stdNormPDF(x float64) float64 { return math.Exp(-0.5*x*x) / math.Sqrt(2*math.Pi) }

// legendreNodes fills a composite Gauss-Legendre rule on [lo, hi] with
// panels panels of order nodes points each.
func legendreNodes(lo, hi float64, panels, order int) (x, w []float64) {
	x = make([]float64, panels*order)
	w = make([]float64, panels*order)
	width := (hi - lo) / float64(panels)
	for p := 0; p < panels; p++ {
		a := lo + float64(p)*width
		quad.Legendre{}.FixedLocations(x[p*order:(p+1)*order], w[p*order:(p+1)*order], a, a+width)
	}
	return x, w
}

// solveIMinusP solves (I - P) v = 1 for the n×n matrix P given row-major,
// returning v. ok is false when the system is singular (an ARL is infinite).
func solveIMinusP(p []float64, n int) (v []float64, ok bool) {
	a := mat.NewDense(n, n, nil)
	for i := 0; i < n; i++ {
		for j := 0; j < n; j++ {
			val := -p[i*n+j]
			if i == j {
				val++
			}
			a.Set(i, j, val)
		}
	}
	ones := make([]float64, n)
	for i := range ones {
		ones[i] = 1
	}
	var lu mat.LU
	lu.Factorize(a)
	var x mat.VecDense
	if err := lu.SolveVecTo(&x, false, mat.NewVecDense(n, ones)); err != nil {
		// A condition-number warning still fills x; only an exactly singular
		// system leaves it unusable.
		if _, isCond := err.(mat.Condition); !isCond {
			return nil, false
		}
	}
	if x.Len() != n {
		// gonum leaves x empty when the factorisation is too badly
		// conditioned to solve (seen for CUSUM intervals h > 30).
		return nil, false
	}
	v = make([]float64, n)
	for i := range v {
		v[i] = x.AtVec(i)
		if math.IsNaN(v[i]) || math.IsInf(v[i], 0) {
			return nil, false
		}
	}
	return v, true
}

// bisect finds x in [lo, hi] with f(x) = 0 for an increasing f, to a relative
// tolerance tol, by the Illinois variant of regula falsi (bracketing, so it
// cannot fail, and superlinear on the smooth log-ARL curves used here). It
// assumes f(lo) < 0 < f(hi).
func bisect(f func(float64) float64, lo, hi, tol float64) float64 {
	flo, fhi := f(lo), f(hi)
	side := 0
	for i := 0; i < 200 && hi-lo > tol*math.Max(1, math.Abs(hi)); i++ {
		x := (lo*fhi - hi*flo) / (fhi - flo)
		if !(x > lo && x < hi) {
			x = 0.5 * (lo + hi)
		}
		fx := f(x)
		switch {
		case fx == 0:
			return x
		case fx < 0:
			lo, flo = x, fx
			if side == -1 {
				fhi /= 2
			}
			side = -1
		default:
			hi, fhi = x, fx
			if side == 1 {
				flo /= 2
			}
			side = 1
		}
		if math.Abs(fx) < 1e-13 {
			return x
		}
	}
	return 0.5 * (lo + hi)
}
