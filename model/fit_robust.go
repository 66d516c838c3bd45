package model

import (
	"math"

	"drainsight/model/lsq"
)

// madScale is 1/Φ^-1(3/4): MAD * madScale estimates σ for Gaussian data.
const madScale = 1.482602218505602

// medianInPlace returns the median of x, reordering x (quickselect, O(n)).
// x must not be empty.
func medianInPlace(x []float64) float64 { return medianBuf(x, nil) }

// medianBuf is medianInPlace with scratch: when buf has room for x (its
// contents are then overwritten), x shorter than bracketMinN goes to the
// branch-free medianSplit instead of quickselect. Signed zeros compare
// equal there, so a zero median may come back with either sign; callers
// pass absolute values, which have no -0.
func medianBuf(x, buf []float64) float64 {
	n := len(x)
	k := n / 2
	if n >= bracketMinN {
		if lo, hi, ok := bracketMedian(x, buf); ok {
			if n%2 == 1 {
				return hi
			}
			return 0.5 * (lo + hi)
		}
	}
	if len(buf) >= n {
		m, _ := medianSplit(x, buf, math.NaN())
		return m
	}
	hi := selectKth(x, k)
	if n%2 == 1 {
		return hi
	}
	lo := x[0]
	for _, v := range x[:k] {
		if v > lo {
			lo = v
		}
	}
	return 0.5 * (lo + hi)
}

// medianSplit returns the median of x (not empty, no NaN): the middle order
// statistic, or the mean of the two middle ones, the same value as
// medianInPlace. It also returns the upper middle value, a good first
// pivot p0 for the next call on similar data (NaN: none). x and buf
// (len(buf) >= len(x)) are overwritten.
func medianSplit(x, buf []float64, p0 float64) (med, upper float64) {
	n := len(x)
	k := n / 2
	klo := k
	if n&1 == 0 {
		klo = k - 1
	}
	lo, hi := selectPair(x, buf, klo, k, p0)
	if n&1 == 1 {
		return hi, hi
	}
	return 0.5 * (lo + hi), hi
}

// selectPair returns the order statistics klo and k of x (0-based, k = klo
// or klo+1; x not empty, no NaN), overwriting x and buf (len(buf) >=
// len(x)); p0 is the first pivot (NaN: none).
//
// Each round splits the candidates around a pivot p (p0 first, then the
// median of three candidates) into the values < p, written forward from
// the front of the other buffer, and the values > p, written backward from
// its end, in one pass without data-dependent branches: every value is
// stored at both write positions and only the position on its side
// advances, so no store is read back within the pass (an in-place
// partition without branches waits on its own stores). The values == p are
// only counted; with p a candidate there is at least one, so every such
// round shrinks the range. The two ranks are followed together; when they
// part, the one outside the run of p is the largest (smallest) of its
// side. Runs of equal values, common with quantised readings, end the
// search early. Signed zeros compare equal.
func selectPair(x, buf []float64, klo, k int, p0 float64) (vlo, vhi float64) {
	src, other := x, buf
	for r := 0; ; r++ {
		m := len(src)
		if m == 1 {
			return src[0], src[0]
		}
		a, b, c := src[0], src[m/2], src[m-1]
		p := max(min(a, b), min(max(a, b), c))
		if r == 0 && p0 == p0 {
			p = p0
		}
		dst := other[:m]
		other = src
		lt, gt := 0, m-1
		for _, v := range src {
			dst[lt] = v
			dst[gt] = v
			lt += b2i(v < p)
			gt -= b2i(v > p)
		}
		eq := gt + 1 // values < p are dst[:lt], values > p dst[eq:]
		switch {
		case k < lt: // both ranks among the smaller values
			src = dst[:lt]
			continue
		case klo >= eq: // both among the larger
			src = dst[eq:]
			klo, k = klo-eq, k-eq
			continue
		}
		vlo, vhi = p, p
		if klo < lt {
			vlo = dst[0]
			for _, v := range dst[1:lt] {
				vlo = max(vlo, v)
			}
		}
		if k >= eq {
			vhi = dst[eq]
			for _, v := range dst[eq+1:] {
				vhi = min(vhi, v)
			}
		}
		return vlo, vhi
	}
}

// b2i is 1 for true and 0 for false; the compiler makes it a flag move.
func b2i(b bool) int {
	if b {
		return 1
	}
	return 0
}

// bracketMinN is the length from which medianInPlace brackets the median
// from a sample before selecting.
const bracketMinN = 4096

// bracketMedian returns the order statistics x_(k-1) and x_(k), k = n/2, of
// x (n >= bracketMinN), reordering x, in about one pass (after Floyd and
// Rivest's selection): a strided sample of about 4 sqrt(n) values gives a
// bracket [lo, hi] that holds rank k with overwhelming probability; one pass
// counts the values below lo and moves those inside the bracket to the
// front, and quickselect finishes on those few. The values are exact, the
// same as a full quickselect; ok is false (x still a permutation of its
// input) when the bracket missed, and the caller selects on all of x. When
// buf has room for x, the selections are selectPair's, with buf as scratch.
func bracketMedian(x, buf []float64) (lo, hi float64, ok bool) {
	n := len(x)
	k := n / 2
	// The sample is swapped to the front of x (x stays a permutation).
	m := min(1024, 4*int(math.Sqrt(float64(n))))
	stride := n / m
	for i := range m {
		x[i], x[i*stride] = x[i*stride], x[i]
	}
	smp := x[:m]
	// Sample ranks m/2 ± 3.5 standard deviations (sqrt(m)/2) and a margin.
	d := int(1.75*math.Sqrt(float64(m))) + 4
	ra, rb := max(m/2-d, 0), min(m/2+d, m-1)
	var blo, bhi float64
	if len(buf) >= n {
		// on copies: the sample must stay in x
		copy(buf, smp)
		bhi, _ = selectPair(buf[:m], buf[m:2*m], rb, rb, math.NaN())
		copy(buf, smp)
		blo, _ = selectPair(buf[:m], buf[m:2*m], ra, ra, math.NaN())
	} else {
		bhi = selectKth(smp, rb)
		blo = selectKth(smp[:rb], ra)
	}
	// Branch-free: the compiler turns both conditional increments into
	// conditional moves, and the swap is done for every value (a no-op
	// move of two values outside the bracket when the increment is 0).
	below, c := 0, 0
	for i, v := range x {
		lt, in := 0, 0
		if v < blo {
			lt = 1
		}
		if v <= bhi {
			in = 1
		}
		x[c], x[i] = v, x[c]
		below += lt
		c += in - lt
	}
	r := k - below
	if r < 1 || r >= c {
		return 0, 0, false
	}
	cand := x[:c]
	if len(buf) >= n {
		lo, hi = selectPair(cand, buf[:c], r-1, r, math.NaN())
		return lo, hi, true
	}
	hi = selectKth(cand, r)
	lo = cand[0]
	for _, v := range cand[1:r] {
		lo = max(lo, v)
	}
	return lo, hi, true
}

// selectKth moves the k-th smallest element to x[k] (elements before it are
// not larger, after it not smaller) and returns it.
func selectKth(x []float64, k int) float64 {
	lo, hi := 0, len(x)-1
	for hi > lo {
		// median of three pivot
		mid := lo + (hi-lo)/2
		if x[mid] < x[lo] {
			x[mid], x[lo] = x[lo], x[mid]
		}
		if x[hi] < x[lo] {
			x[hi], x[lo] = x[lo], x[hi]
		}
		if x[hi] < x[mid] {
			x[hi], x[mid] = x[mid], x[hi]
		}
		p := x[mid]
		i, j := lo, hi
		for i <= j {
			for x[i] < p {
				i++
			}
			for x[j] > p {
				j--
			}
			if i <= j {
				x[i], x[j] = x[j], x[i]
				i++
				j--
			}
		}
		switch {
		case k <= j:
			hi = j
		case k >= i:
			lo = i
		default:
			return x[k]
		}
	}
	return x[k]
}

// lineFit is a weighted straight line z = a + b x.
type lineFit struct {
	a, b   float64
	sxx    float64 // Σ w (x - x̄)^2
	sumW   float64
	xbar   float64
	ss     float64 // Σ w (z - a - b x)^2
	n      int     // points with w > 0
	sigma  float64 // robust scale of sqrt(w) * residual (MAD)
	robust bool    // IRLS was needed
}

// fitLine computes the weighted least-squares line over points with w > 0.
func fitLine(x, z, w []float64) lineFit {
	var sw, swx, swz float64
	n := 0
	for i, wi := range w {
		if wi > 0 {
			sw += wi
			swx += wi * x[i]
			swz += wi * z[i]
			n++
		}
	}
	lf := lineFit{sumW: sw, n: n}
	if n < 2 || !(sw > 0) {
		lf.a, lf.b = math.NaN(), math.NaN()
		return lf
	}
	xb, zb := swx/sw, swz/sw
	var sxx, sxz float64
	for i, wi := range w {
		if wi > 0 {
			dx := x[i] - xb
			sxx += wi * dx * dx
			sxz += wi * dx * (z[i] - zb)
		}
	}
	lf.xbar, lf.sxx = xb, sxx
	lf.b = sxz / sxx
	lf.a = zb - lf.b*xb
	return lf
}

// robustLineFit fits z = a + b x with base weights w0 (0 excludes a point)
// and, when some standardised residual e_i = sqrt(w0_i)(z_i - a - b x_i)
// exceeds zOut robust σ, refines by iteratively reweighted least squares
// (Huber weights min(1, c/|u|) or Tukey biweight (1-(u/c)^2)^2, u = e/σ,
// σ = 1.4826 MAD of e, fixed after the first fit). On return out[i] is true
// for points with |e_i| > zOut σ at the final line, which are also dropped
// from ss and n. scratch must have len(x) capacity; w is overwritten with
// the final weights.
func robustLineFit(x, z, w0, w, scratch []float64, out []bool, tukey bool, c, zOut float64, iters int) lineFit {
	copy(w, w0)
	lf := fitLine(x, z, w)
	if lf.n < 3 {
		return lf
	}
	abs := scratch[:0]
	for i, wi := range w0 {
		if wi > 0 {
			abs = append(abs, math.Abs(math.Sqrt(wi)*(z[i]-lf.a-lf.b*x[i])))
		}
	}
	sigma := madScale * medianBuf(abs, w) // w is rewritten below
	if !(sigma > 0) {
		// More than half the points sit exactly on the line: use the
		// classical scale of the rest so that gross errors still show.
		var s float64
		for i, wi := range w0 {
			if wi > 0 {
				e := z[i] - lf.a - lf.b*x[i]
				s += wi * e * e
			}
		}
		sigma = math.Sqrt(s / float64(lf.n))
	}
	lf.sigma = sigma
	lim := zOut * sigma
	need := false
	for i, wi := range w0 {
		if wi > 0 && math.Abs(math.Sqrt(wi)*(z[i]-lf.a-lf.b*x[i])) > lim {
			need = true
			break
		}
	}
	if need && sigma > 0 {
		lf.robust = true
		for range iters {
			for i, wi := range w0 {
				if !(wi > 0) {
					w[i] = 0
					continue
				}
				u := math.Sqrt(wi) * (z[i] - lf.a - lf.b*x[i]) / (c * sigma)
				au := math.Abs(u)
				switch {
				case tukey && au >= 1:
					w[i] = 0
				case tukey:
					v := 1 - u*u
					w[i] = wi * v * v
				case au > 1:
					w[i] = wi / au
				default:
					w[i] = wi
				}
			}
			nf := fitLine(x, z, w)
			if nf.n < 3 {
				break
			}
			nf.sigma, nf.robust = sigma, true
			lf = nf
		}
	}
	// Classify at the robust line, then refit plain WLS over the inliers so
	// that a, b, ss and sxx are the classical estimates on the kept points.
	nOut := 0
	for i, wi := range w0 {
		out[i] = false
		w[i] = wi
		if wi > 0 && sigma > 0 && math.Abs(math.Sqrt(wi)*(z[i]-lf.a-lf.b*x[i])) > lim {
			out[i] = true
			w[i] = 0
			nOut++
		}
	}
	robust := lf.robust
	if nOut > 0 || robust {
		lf = fitLine(x, z, w)
		lf.robust = robust
	}
	lf.sigma = sigma
	var ss float64
	for i, wi := range w {
		if wi > 0 {
			e := z[i] - lf.a - lf.b*x[i]
			ss += wi * e * e
		}
	}
	lf.ss = ss
	return lf
}

// invSmall inverts a small symmetric positive definite matrix.
func invSmall(a []float64, n int) ([]float64, bool) { return lsq.InverseSPD(a, n) }
