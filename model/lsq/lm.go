package lsq

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
)

// Status tells how a minimisation ended.
type Status int

const (
	// Converged: the relative step, the relative decrease of S, or the scaled
	// gradient fell below its tolerance.
	Converged Status = iota + 1
	// MaxIterations: the iteration limit was reached first.
	MaxIterations
	// Stalled: no damping made S decrease (λ grew past 1e16).
	Stalled
	// Singular: JᵀJ at the solution is not positive definite, so the
	// covariance is unavailable.
	Singular
)

func (s Status) String() string {
	switch s {
	case Converged:
		return "converged"
	case MaxIterations:
		return "max-iterations"
	case Stalled:
		return "stalled"
	case Singular:
		return "singular"
	}
	return "unknown"
}

// Options tunes the minimiser. The zero value selects every default.
type Options struct {
	// MaxIterations bounds the accepted-plus-rejected steps. Default 200.
	MaxIterations int
	// XTol: stop when every |δ_i| <= XTol (|p_i| + XTol). Default 1e-12.
	XTol float64
	// FTol: stop when an accepted step lowers S by less than FTol*S.
	// Default 1e-15.
	FTol float64
	// GTol: stop when max_i |(Jᵀr)_i| / sqrt(D_i S) <= GTol. Default 1e-13.
	GTol float64
	// Lambda0 is the initial damping relative to diag(JᵀJ). Default 1e-3.
	Lambda0 float64
	// Fused makes MinimizeNormal ask for JᵀJ and Jᵀr at every trial point,
	// saving one pass per accepted step when the caller computes residuals
	// and derivatives together anyway. Default false.
	Fused bool
}

func (o *Options) defaults() Options {
	d := Options{MaxIterations: 200, XTol: 1e-12, FTol: 1e-15, GTol: 1e-13, Lambda0: 1e-3}
	if o == nil {
		return d
	}
	d.Fused = o.Fused
	if o.MaxIterations > 0 {
		d.MaxIterations = o.MaxIterations
	}
	if o.XTol > 0 {
		d.XTol = o.XTol
	}
	if o.FTol > 0 {
		d.FTol = o.FTol
	}
	if o.GTol > 0 {
		d.GTol = o.GTol
	}
	if o.Lambda0 > 0 {
		d.Lambda0 = o.Lambda0
	}
	return d
}

// Result is the outcome of a minimisation.
//
// Params is the minimiser; Cov the n×n covariance s^2 (JᵀJ)^-1 (row-major,
// nil when Status is Singular or DF <= 0); SE the square roots of its
// diagonal; SS the residual sum of squares; DF = m - n.
type Result struct {
	Params     []float64
	Cov        []float64
	SE         []float64
	SS         float64
	DF         int
	Iterations int
	Status     Status
}

// NormalFunc evaluates a least-squares problem at p and returns the residual
// sum of squares. When jtj and jtr are not nil it also fills JᵀJ (n×n,
// row-major, both triangles) and Jᵀr, with J the Jacobian of the residuals.
// It returns NaN or +Inf when p is outside the domain; the step is then
// rejected.
type NormalFunc func(p, jtj, jtr []float64) float64

// ErrNoDegreesOfFreedom is returned when there are no more residuals than
// parameters.
var ErrNoDegreesOfFreedom = errors.New("lsq: no more residuals than parameters")

// MinimizeNormal minimises the sum of squares described by f from p0, with
// m residuals (used for the degrees of freedom). The returned error is nil
// for Converged and MaxIterations (check Status), and describes the failure
// otherwise; Result still holds the best point found.
//
// A run can end on a plateau where a parameter has run off to a value at
// which it no longer affects the residuals (|p_j| sqrt((JᵀJ)_jj) below 1e-8
// sqrt(S), e.g. a rate constant growing without bound). The run is then
// repeated from p0 with 1e3 and 1e6 times the initial damping, which keeps
// the first steps short, and the best run without a vanished parameter is
// returned.
func MinimizeNormal(f NormalFunc, p0 []float64, m int, opt *Options) (Result, error) {
	o := opt.defaults()
	var first Result
	var firstErr error
	for attempt := range 3 {
		res, vanished, err := minimizeOnce(f, p0, m, o)
		if attempt == 0 {
			first, firstErr = res, err
		}
		if !vanished {
			return res, err
		}
		o.Lambda0 *= 1e3
	}
	if firstErr == nil {
		firstErr = errors.New("lsq: a parameter stopped affecting the residuals (plateau); no damping avoided it")
	}
	return first, firstErr
}

func minimizeOnce(f NormalFunc, p0 []float64, m int, o Options) (Result, bool, error) {
	n := len(p0)
	if n == 0 {
		return Result{}, false, errors.New("lsq: no parameters")
	}
	if m <= n {
		return Result{}, false, ErrNoDegreesOfFreedom
	}
	w := newWork(n)
	p := append([]float64(nil), p0...)
	ss := f(p, w.jtj, w.jtr)
	if math.IsNaN(ss) || math.IsInf(ss, 0) {
		return Result{Params: p, SS: ss}, false, errors.New("lsq: the objective is not finite at the start point")
	}
	res := Result{Params: p, DF: m - n, Status: MaxIterations}
	lambda, nu := o.Lambda0, 2.0
	for i := range n {
		w.d[i] = math.Max(w.jtj[i*n+i], 1e-300)
	}
	it := 0
	for ; it < o.MaxIterations; it++ {
		if gradSmall(w, n, ss, o.GTol) {
			res.Status = Converged
			break
		}
		for i := range n {
			w.d[i] = math.Max(w.d[i], w.jtj[i*n+i])
		}
		// Damped, Jacobi-scaled system: (S JᵀJ S + λ I) (S^-1 δ) = -S Jᵀr.
		for i := range n {
			si := 1 / math.Sqrt(w.d[i])
			w.s[i] = si
			for j := range n {
				w.a[i*n+j] = w.jtj[i*n+j] * si / math.Sqrt(w.d[j])
			}
			w.a[i*n+i] += lambda
			w.b[i] = -w.jtr[i] * si
		}
		if !cholSolve(w.a, w.b, n) {
			lambda *= nu
			nu *= 2
			if lambda > 1e16 {
				res.Status = Stalled
				break
			}
			continue
		}
		small := true
		var pred float64
		for i := range n {
			delta := w.b[i] * w.s[i]
			w.step[i] = delta
			w.pTry[i] = p[i] + delta
			if math.Abs(delta) > o.XTol*(math.Abs(p[i])+o.XTol) {
				small = false
			}
			pred += delta * (lambda*w.d[i]*delta - w.jtr[i])
		}
		var ssTry float64
		if o.Fused {
			ssTry = f(w.pTry, w.jtjTry, w.jtrTry)
		} else {
			ssTry = f(w.pTry, nil, nil)
		}
		if ssTry < ss || (ssTry == ss && small) {
			rho := (ss - ssTry) / pred
			decrease := ss - ssTry
			copy(p, w.pTry)
			oldSS := ss
			if o.Fused {
				ss = ssTry
				w.jtj, w.jtjTry = w.jtjTry, w.jtj
				w.jtr, w.jtrTry = w.jtrTry, w.jtr
			} else {
				ss = f(p, w.jtj, w.jtr)
			}
			lambda *= math.Max(1.0/3, 1-math.Pow(2*rho-1, 3))
			lambda = math.Max(lambda, 1e-300)
			nu = 2
			if small || decrease <= o.FTol*oldSS {
				res.Status = Converged
				it++
				break
			}
			continue
		}
		if small {
			res.Status = Converged
			it++
			break
		}
		lambda *= nu
		nu *= 2
		if lambda > 1e16 {
			res.Status = Stalled
			break
		}
	}
	res.Iterations = it
	res.SS = ss
	res.Params = p
	var err error
	if res.Status == Stalled {
		err = fmt.Errorf("lsq: stalled after %d iterations at S = %g", it, ss)
	}
	vanished := false
	if ss > 0 {
		for i := range n {
			if p[i] != 0 && math.Abs(p[i])*math.Sqrt(w.jtj[i*n+i]) < 1e-8*math.Sqrt(ss) {
				vanished = true
			}
		}
	}
	if !covFromNormal(w, n, ss/float64(res.DF), &res) && err == nil {
		res.Status = Singular
		err = errors.New("lsq: JᵀJ is singular at the solution: parameters not identifiable")
	}
	return res, vanished, err
}

func gradSmall(w *work, n int, ss, gtol float64) bool {
	if ss == 0 {
		return true
	}
	for i := range n {
		if math.Abs(w.jtr[i])/math.Sqrt(w.d[i]*ss) > gtol {
			return false
		}
	}
	return true
}

// covFromNormal inverts the Jacobi-scaled JᵀJ held in w.
func covFromNormal(w *work, n int, s2 float64, res *Result) bool {
	for i := range n {
		di := w.jtj[i*n+i]
		if !(di > 0) {
			return false
		}
		w.s[i] = 1 / math.Sqrt(di)
	}
	for i := range n {
		for j := range n {
			w.a[i*n+j] = w.jtj[i*n+j] * w.s[i] * w.s[j]
		}
	}
	inv := make([]float64, n*n)
	if !cholInverse(w.a, inv, n) {
		return false
	}
	res.Cov = inv
	res.SE = make([]float64, n)
	for i := range n {
		for j := range n {
			inv[i*n+j] *= s2 * w.s[i] * w.s[j]
		}
		res.SE[i] = math.Sqrt(inv[i*n+i])
	}
	return true
}

type work struct {
	jtj, a, jtjTry           []float64
	jtr, b, d, s, step, pTry []float64
	jtrTry                   []float64
}

func newWork(n int) *work {
	buf := make([]float64, 3*n*n+7*n)
	w := &work{}
	w.jtjTry, buf = buf[:n*n], buf[n*n:]
	w.jtrTry, buf = buf[:n], buf[n:]
	w.jtj, buf = buf[:n*n], buf[n*n:]
	w.a, buf = buf[:n*n], buf[n*n:]
	w.jtr, buf = buf[:n], buf[n:]
	w.b, buf = buf[:n], buf[n:]
	w.d, buf = buf[:n], buf[n:]
	w.s, buf = buf[:n], buf[n:]
	w.step, buf = buf[:n], buf[n:]
	w.pTry = buf[:n]
	return w
}

// cholSolve overwrites a (n×n SPD, row-major) with its Cholesky factor and b
// with the solution of a x = b. It reports false if a is not positive
// definite.
func cholSolve(a, b []float64, n int) bool {
	if !cholFactor(a, n) {
		return false
	}
	for i := range n { // L y = b
		s := b[i]
		for k := range i {
			s -= a[i*n+k] * b[k]
		}
		b[i] = s / a[i*n+i]
	}
	for i := n - 1; i >= 0; i-- { // Lᵀ x = y
		s := b[i]
		for k := i + 1; k < n; k++ {
			s -= a[k*n+i] * b[k]
		}
		b[i] = s / a[i*n+i]
	}
	return true
}

// cholFactor stores L in the lower triangle of a.
func cholFactor(a []float64, n int) bool {
	for j := range n {
		s := a[j*n+j]
		for k := range j {
			s -= a[j*n+k] * a[j*n+k]
		}
		if !(s > 0) {
			return false
		}
		ljj := math.Sqrt(s)
		a[j*n+j] = ljj
		for i := j + 1; i < n; i++ {
			s := a[i*n+j]
			for k := range j {
				s -= a[i*n+k] * a[j*n+k]
			}
			a[i*n+j] = s / ljj
		}
	}
	return true
}

// cholInverse writes a^-1 into inv (a is destroyed).
func cholInverse(a, inv []float64, n int) bool {
	if !cholFactor(a, n) {
		return false
	}
	col := make([]float64, n)
	for c := range n {
		for i := range n {
			col[i] = 0
		}
		col[c] = 1
		for i := range n {
			s := col[i]
			for k := range i {
				s -= a[i*n+k] * col[k]
			}
			col[i] = s / a[i*n+i]
		}
		for i := n - 1; i >= 0; i-- {
			s := col[i]
			for k := i + 1; k < n; k++ {
				s -= a[k*n+i] * col[k]
			}
			col[i] = s / a[i*n+i]
		}
		for i := range n {
			inv[i*n+c] = col[i]
		}
	}
	return true
}

// Problem is a nonlinear least-squares problem in residual form.
type Problem struct {
	// M is the number of residuals.
	M int
	// Residuals writes the m residuals at p into r.
	Residuals func(p, r []float64)
	// Jacobian writes dr_i/dp_j at p into jac[i*n+j] (row-major m×n). When
	// nil, forward differences with step sqrt(eps)(|p_j|+sqrt(eps)) are used.
	Jacobian func(p, jac []float64)
}

// Minimize minimises Σ r_i(p)^2 for a residual-form problem from p0. The
// covariance is computed from a QR factorisation of the column-scaled
// Jacobian at the solution rather than from the normal equations, which
// keeps it accurate on ill-conditioned problems.
func Minimize(pr Problem, p0 []float64, opt *Options) (Result, error) {
	m, n := pr.M, len(p0)
	if m <= n {
		return Result{}, ErrNoDegreesOfFreedom
	}
	r := make([]float64, m)
	r2 := make([]float64, m)
	jac := make([]float64, m*n)
	pp := make([]float64, n)
	jacobian := func(p []float64) {
		if pr.Jacobian != nil {
			pr.Jacobian(p, jac)
			return
		}
		pr.Residuals(p, r)
		copy(pp, p)
		eps := math.Sqrt(0x1p-52)
		for j := range n {
			h := eps * (math.Abs(p[j]) + eps)
			pp[j] = p[j] + h
			pr.Residuals(pp, r2)
			pp[j] = p[j]
			for i := range m {
				jac[i*n+j] = (r2[i] - r[i]) / h
			}
		}
	}
	f := func(p, jtj, jtr []float64) float64 {
		pr.Residuals(p, r)
		var ss float64
		for _, v := range r {
			ss += v * v
		}
		if jtj == nil {
			return ss
		}
		jacobian(p)
		pr.Residuals(p, r)
		for a := range n {
			var g float64
			for i := range m {
				g += jac[i*n+a] * r[i]
			}
			jtr[a] = g
			for b := a; b < n; b++ {
				var s float64
				for i := range m {
					s += jac[i*n+a] * jac[i*n+b]
				}
				jtj[a*n+b], jtj[b*n+a] = s, s
			}
		}
		return ss
	}
	res, err := MinimizeNormal(f, p0, m, opt)
	if res.Params == nil || res.Status == Stalled {
		return res, err
	}
	// Covariance from the column-scaled QR of J at the solution.
	jacobian(res.Params)
	scale := make([]float64, n)
	for j := range n {
		var s float64
		for i := range m {
			s += jac[i*n+j] * jac[i*n+j]
		}
		scale[j] = math.Sqrt(s)
		if !(scale[j] > 0) {
			res.Status, res.Cov, res.SE = Singular, nil, nil
			return res, errors.New("lsq: a Jacobian column is zero at the solution: parameter not identifiable")
		}
	}
	js := mat.NewDense(m, n, nil)
	for i := range m {
		for j := range n {
			js.Set(i, j, jac[i*n+j]/scale[j])
		}
	}
	cov, ok := covFromQR(js, res.SS/float64(res.DF))
	if !ok {
		res.Status, res.Cov, res.SE = Singular, nil, nil
		return res, errors.New("lsq: the Jacobian is rank deficient at the solution: parameters not identifiable")
	}
	res.SE = make([]float64, n)
	for i := range n {
		for j := range n {
			cov[i*n+j] /= scale[i] * scale[j]
		}
		res.SE[i] = math.Sqrt(cov[i*n+i])
	}
	res.Cov = cov
	if res.Status == Singular {
		res.Status = Converged
		err = nil
	}
	return res, err
}

// covFromQR returns s2 (XᵀX)^-1 = s2 R^-1 R^-T from the QR of x (m×n, m > n).
func covFromQR(x *mat.Dense, s2 float64) ([]float64, bool) {
	_, n := x.Dims()
	var qr mat.QR
	qr.Factorize(x)
	var rd mat.Dense
	qr.RTo(&rd)
	r := mat.NewTriDense(n, mat.Upper, nil)
	for i := range n {
		for j := i; j < n; j++ {
			r.SetTri(i, j, rd.At(i, j))
		}
	}
	var rinv mat.TriDense
	if err := rinv.InverseTri(r); err != nil {
		var c mat.Condition
		if !errors.As(err, &c) || math.IsInf(float64(c), 0) {
			return nil, false
		}
	}
	cov := make([]float64, n*n)
	for i := range n {
		for j := range n {
			var s float64
			for k := max(i, j); k < n; k++ {
				s += rinv.At(i, k) * rinv.At(j, k)
			}
			cov[i*n+j] = s2 * s
		}
	}
	for i := range n {
		if !(cov[i*n+i] > 0) || math.IsInf(cov[i*n+i], 0) {
			return nil, false
		}
	}
	return cov, true
}

// InverseSPD returns the inverse of the symmetric positive definite n×n
// matrix a (row-major; a is not modified), computed by Cholesky after Jacobi
// scaling. It reports false when a is not positive definite.
func InverseSPD(a []float64, n int) ([]float64, bool) {
	s := make([]float64, n)
	for i := range n {
		if !(a[i*n+i] > 0) {
			return nil, false
		}
		s[i] = 1 / math.Sqrt(a[i*n+i])
	}
	w := make([]float64, n*n)
	for i := range n {
		for j := range n {
			w[i*n+j] = a[i*n+j] * s[i] * s[j]
		}
	}
	inv := make([]float64, n*n)
	if !cholInverse(w, inv, n) {
		return nil, false
	}
	for i := range n {
		for j := range n {
			inv[i*n+j] *= s[i] * s[j]
		}
	}
	return inv, true
}
