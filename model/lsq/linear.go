package lsq

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
)

// LinearResult is the outcome of a linear least-squares fit.
//
// Params is b; Cov the n×n covariance s^2 (XᵀX)^-1 (row-major); SE the
// square roots of its diagonal; SS the residual sum of squares; DF = m - n;
// ResidualSD = sqrt(SS/DF); R2 = 1 - SS/Σ(y-ȳ)^2 (the centred R^2, meaningful
// when X has an intercept column).
type LinearResult struct {
	Params     []float64
	Cov        []float64
	SE         []float64
	SS         float64
	DF         int
	ResidualSD float64
	R2         float64
}

// Linear solves min_b ||X b - y||_2 by Householder QR of X (m×n, m > n, full
// column rank). The columns are scaled to unit norm first, which leaves the
// solution unchanged and keeps the covariance accurate when the columns
// differ by many orders of magnitude.
func Linear(x mat.Matrix, y []float64) (LinearResult, error) {
	m, n := x.Dims()
	if len(y) != m {
		return LinearResult{}, fmt.Errorf("lsq: X has %d rows but y has %d values", m, len(y))
	}
	if m <= n {
		return LinearResult{}, ErrNoDegreesOfFreedom
	}
	scale := make([]float64, n)
	xs := mat.NewDense(m, n, nil)
	for j := range n {
		var s float64
		for i := range m {
			s += x.At(i, j) * x.At(i, j)
		}
		scale[j] = math.Sqrt(s)
		if !(scale[j] > 0) || math.IsInf(scale[j], 0) {
			return LinearResult{}, fmt.Errorf("lsq: column %d of X is zero or not finite", j)
		}
		for i := range m {
			xs.Set(i, j, x.At(i, j)/scale[j])
		}
	}
	var qr mat.QR
	qr.Factorize(xs)
	var b mat.VecDense
	if err := qr.SolveVecTo(&b, false, mat.NewVecDense(m, append([]float64(nil), y...))); err != nil {
		var c mat.Condition
		if !errors.As(err, &c) || math.IsInf(float64(c), 0) {
			return LinearResult{}, fmt.Errorf("lsq: X is rank deficient: %w", err)
		}
	}
	res := LinearResult{Params: make([]float64, n), DF: m - n}
	for j := range n {
		res.Params[j] = b.AtVec(j) / scale[j]
	}
	var ybar float64
	for _, v := range y {
		ybar += v
	}
	ybar /= float64(m)
	var sst float64
	for i := range m {
		var fit float64
		for j := range n {
			fit += xs.At(i, j) * b.AtVec(j)
		}
		r := y[i] - fit
		res.SS += r * r
		sst += (y[i] - ybar) * (y[i] - ybar)
	}
	res.ResidualSD = math.Sqrt(res.SS / float64(res.DF))
	res.R2 = 1 - res.SS/sst
	cov, ok := covFromQR(xs, res.SS/float64(res.DF))
	if !ok {
		return res, errors.New("lsq: X is rank deficient: no covariance")
	}
	res.SE = make([]float64, n)
	for i := range n {
		for j := range n {
			cov[i*n+j] /= scale[i] * scale[j]
		}
		res.SE[i] = math.Sqrt(cov[i*n+i])
	}
	res.Cov = cov
	return res, nil
}
