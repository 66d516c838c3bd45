package model

import (
	"fmt"
	"math"
	"reflect"
	"slices"
	"sync"
)

// transformIntervals is the number of u = sqrt(h) intervals of a tabulated
// head transform. With cubic Hermite interpolation on exact node derivatives
// the interpolation error is about du^4/384 max|F””|, below 1e-12 relative
// for the smooth shapes here; the node values come from 6-point
// Gauss-Legendre quadrature per interval.
const transformIntervals = 2048

// HeadTransform is the drain-linearising transform of one tank,
//
//	F(h) = ∫_0^h A(s)/sqrt(s) ds   [m^2.5]
//
// with A the free-surface area at head s above the outlet. A clean drain
// A(h) dh/dt = -K sqrt(h) obeys F(h(t)) = F(h0) - K t, so F turns every drain
// into a straight line of slope -K.
//
// For a constant area (vertical cylinder, rectangle, or a cone-bottom
// cylinder whose outlet is above the cone) F(h) = 2 A sqrt(h) in closed form.
// Otherwise F is tabulated on a uniform grid in u = sqrt(h), where the
// substitution s = u^2 removes the 1/sqrt(s) singularity,
//
//	F(u) = ∫_0^u 2 A(v^2) dv,  dF/du = 2 A(u^2),
//
// and interpolated by cubic Hermite pieces on the exact node derivatives
// (limited à la Fritsch-Carlson where the area vanishes, so F stays
// monotone). Relative accuracy is 1e-9 or better where A is smooth; near a
// kink of A (the top of a cone, a strapping-table knot) the error is local
// and of order du^2. Above the drainable height F is continued with the top
// area; at or below zero head F is 0.
//
// A HeadTransform is immutable and safe for concurrent use.
type HeadTransform struct {
	hMax   float64 // drainable height, m
	constA float64 // > 0 for the closed form
	area   func(float64) float64
	shape  Shape
	elev   float64
	// table
	uMax, du, invDu float64
	aTop            float64      // area at hMax, for the continuation above it
	fTop            float64      // F(hMax)
	fNode           []float64    // F at the nodes
	poly            [][4]float64 // per interval: F = c0 + t(c1 + t(c2 + t c3)), t in [0,1]
	lNode, lDer     []float64    // L(u) and du*dL/du at the nodes, see logMoment
	breaksU         []float64    // kinks of the area in u, ascending
	// fIdx[b] is the last interval whose start node is <= b fTop/len(fIdx)-1:
	// where Inv starts its interval search without a hint.
	fIdx     []int32
	fIdxStep float64 // len(fIdx)-1 over fTop
}

// NewHeadTransform builds the transform for a tank. It returns an error when
// the tank fails Tank.Validate.
func NewHeadTransform(t *Tank) (*HeadTransform, error) {
	if err := t.Validate(); err != nil {
		return nil, err
	}
	ht := &HeadTransform{hMax: t.DrainableHeightM(), area: t.AreaAtHeadM2, shape: t.Shape, elev: t.OutletElevM}
	if a, ok := constantArea(t); ok {
		ht.constA = a
		ht.aTop = a
		ht.fTop = 2 * a * math.Sqrt(ht.hMax)
		return ht, nil
	}
	ht.buildTable()
	if !(ht.fTop > 0) {
		return nil, fmt.Errorf("model: tank %q: the area is zero over the whole drainable height", t.ID)
	}
	return ht, nil
}

// constantArea reports the area of shapes whose area is constant over the
// drainable height.
func constantArea(t *Tank) (float64, bool) {
	switch s := t.Shape.(type) {
	case VerticalCylinder:
		return s.AreaM2(0), true
	case Rectangular:
		return s.AreaM2(0), true
	case ConeBottomCylinder:
		if t.OutletElevM >= s.ConeHeightM {
			return s.AreaM2(s.HeightM()), true
		}
	}
	return 0, false
}

// Gauss-Legendre 6-point nodes and weights on [-1, 1] (standard tables,
// e.g. Abramowitz & Stegun 25.4.30; also recomputed in the tests).
var (
	gl6x = [6]float64{-0.9324695142031521, -0.6612093864662645, -0.2386191860831969, 0.2386191860831969, 0.6612093864662645, 0.9324695142031521}
	gl6w = [6]float64{0.1713244923791704, 0.3607615730481386, 0.4679139345726910, 0.4679139345726910, 0.3607615730481386, 0.1713244923791704}
)

// quad integrates 2A(v^2) and 4A(v^2) ln v over [a, b] in u with the 6-point
// Gauss-Legendre rule. A square-root or logarithmic end singularity is
// smoothed by v = a + (b-a) w^2 (left) or v = b - (b-a) w^2 (right).
func (ht *HeadTransform) quad(a, b float64, left, right bool) (f, l float64) {
	w := b - a
	for k := range 6 {
		x := 0.5 * (gl6x[k] + 1)
		v, jac := a+w*x, 0.5*w*gl6w[k]
		switch {
		case left:
			v, jac = a+w*x*x, w*x*gl6w[k]
		case right:
			v, jac = b-w*x*x, w*x*gl6w[k]
		}
		ar := ht.area(v * v)
		f += 2 * ar * jac
		if v > 0 {
			l += 4 * ar * math.Log(v) * jac
		}
	}
	return f, l
}

func (ht *HeadTransform) buildTable() {
	n := transformIntervals
	ht.uMax = math.Sqrt(ht.hMax)
	ht.du = ht.uMax / float64(n)
	ht.invDu = float64(n) / ht.uMax
	ht.fNode = make([]float64, n+1)
	der := make([]float64, n+1) // du * dF/du
	ht.lNode = make([]float64, n+1)
	ht.lDer = make([]float64, n+1)
	du := ht.du
	for j := 0; j <= n; j++ {
		u := float64(j) * du
		if j == n {
			u = ht.uMax
		}
		a := ht.area(u * u)
		der[j] = 2 * a * du
		if u > 0 {
			ht.lDer[j] = 4 * a * math.Log(u) * du
		}
	}
	var breaks []float64 // kinks of the area, in u
	if b, ok := ht.shape.(interface{ levelBreaks() []float64 }); ok {
		for _, l := range b.levelBreaks() {
			if h := l - ht.elev; h > 0 && h < ht.hMax {
				breaks = append(breaks, math.Sqrt(h))
			}
		}
		slices.Sort(breaks)
	}
	ht.breaksU = breaks
	bi := 0
	for j := range n {
		u0, u1 := float64(j)*du, float64(j+1)*du
		if j == n-1 {
			u1 = ht.uMax
		}
		left := j == 0
		var sf, sl float64
		for bi < len(breaks) && breaks[bi] <= u0 {
			bi++
		}
		a := u0
		for bi < len(breaks) && breaks[bi] < u1 {
			f, l := ht.quad(a, breaks[bi], left, false)
			sf, sl = sf+f, sl+l
			a, left = breaks[bi], false
			bi++
		}
		f, l := ht.quad(a, u1, left, j == n-1)
		ht.fNode[j+1] = ht.fNode[j] + sf + f
		ht.lNode[j+1] = ht.lNode[j] + sl + l
	}
	ht.poly = make([][4]float64, n)
	for j := range n {
		f0, f1 := ht.fNode[j], ht.fNode[j+1]
		d0, d1 := der[j], der[j+1]
		if sec := f1 - f0; sec <= 0 {
			d0, d1 = 0, 0
		} else if a, b := d0/sec, d1/sec; a*a+b*b > 9 {
			// Fritsch-Carlson: pull the end slopes into the monotone region.
			tau := 3 / math.Hypot(a, b)
			d0, d1 = tau*a*sec, tau*b*sec
		}
		ht.poly[j] = [4]float64{f0, d0, 3*(f1-f0) - 2*d0 - d1, 2*(f0-f1) + d0 + d1}
	}
	ht.fTop = ht.fNode[n]
	ht.aTop = ht.area(ht.hMax)
	if ht.fTop > 0 {
		ht.fIdx = make([]int32, n+1)
		ht.fIdxStep = float64(n) / ht.fTop
		j := 0
		for b := range ht.fIdx {
			fb := float64(b) / ht.fIdxStep
			for j < n-1 && ht.fNode[j+1] <= fb {
				j++
			}
			ht.fIdx[b] = int32(j)
		}
	}
}

// MaxHeadM is the drainable height of the tank, m.
func (ht *HeadTransform) MaxHeadM() float64 { return ht.hMax }

// AreaM2 is the free-surface area at head h above the outlet, m^2.
func (ht *HeadTransform) AreaM2(headM float64) float64 {
	if ht.constA > 0 {
		return ht.constA
	}
	return ht.area(headM)
}

// F returns F(h) in m^2.5; 0 for h <= 0.
func (ht *HeadTransform) F(headM float64) float64 {
	if !(headM > 0) {
		return 0
	}
	u := math.Sqrt(headM)
	if ht.constA > 0 {
		return 2 * ht.constA * u
	}
	if u >= ht.uMax {
		return ht.fTop + 2*ht.aTop*(u-ht.uMax)
	}
	x := u * ht.invDu
	j := int(x)
	if j >= len(ht.poly) {
		j = len(ht.poly) - 1
	}
	if j < directIntervals {
		return ht.direct(u)
	}
	t := x - float64(j)
	c := &ht.poly[j]
	return c[0] + t*(c[1]+t*(c[2]+t*c[3]))
}

// fg returns F(h) and g = dh/dF = sqrt(h)/A(h) at h > 0, with g taken from
// the interpolant's own derivative where F is tabulated (so that it is the
// exact derivative of the function evaluated). g is 0 where the area is 0.
func (ht *HeadTransform) fg(headM float64) (f, g float64) {
	if !(headM > 0) {
		return 0, 0
	}
	u := math.Sqrt(headM)
	if ht.constA > 0 {
		return 2 * ht.constA * u, u / ht.constA
	}
	if u >= ht.uMax {
		f = ht.fTop + 2*ht.aTop*(u-ht.uMax)
		if ht.aTop > 0 {
			g = u / ht.aTop
		}
		return f, g
	}
	x := u * ht.invDu
	j := int(x)
	if j >= len(ht.poly) {
		j = len(ht.poly) - 1
	}
	if j < directIntervals {
		if a := ht.area(headM); a > 0 {
			g = u / a
		}
		return ht.direct(u), g
	}
	t := x - float64(j)
	c := &ht.poly[j]
	if d := c[1] + t*(2*c[2]+3*t*c[3]); d > 0 {
		g = 2 * u * ht.du / d
	}
	return c[0] + t*(c[1]+t*(c[2]+t*c[3])), g
}

// invG inverts F like inv and also returns g = dh/dF at the result (0 at
// zero head or zero area).
func (ht *HeadTransform) invG(f float64, hint int) (h, g float64, j int) {
	if !(f > 0) {
		return 0, 0, hint
	}
	if ht.constA > 0 {
		u := f / (2 * ht.constA)
		return u * u, u / ht.constA, 0
	}
	h, j = ht.inv(f, hint)
	u := math.Sqrt(h)
	switch {
	case f >= ht.fTop:
		if ht.aTop > 0 {
			g = u / ht.aTop
		}
	case j < directIntervals:
		if a := ht.area(h); a > 0 {
			g = u / a
		}
	default:
		t := u*ht.invDu - float64(j)
		c := &ht.poly[j]
		if d := c[1] + t*(2*c[2]+3*t*c[3]); d > 0 {
			g = 2 * u * ht.du / d
		}
	}
	return h, g, j
}

// directIntervals is the number of bottom intervals where F is integrated
// directly instead of interpolated: where the area vanishes at the outlet
// (sphere, cone, horizontal cylinder) F grows like a power of u and a cubic
// piece is not accurate to 1e-9 relative there. This is the bottom
// (128/2048)^2 = 0.4 % of the drainable height.
const directIntervals = 128

// direct integrates F(u) = ∫_0^u 2A(v^2) dv by Gauss-Legendre, split at the
// area's kinks.
func (ht *HeadTransform) direct(u float64) float64 {
	var f float64
	a, left := 0.0, true
	for _, b := range ht.breaksU {
		if b >= u {
			break
		}
		df, _ := ht.quad(a, b, left, false)
		f += df
		a, left = b, false
	}
	df, _ := ht.quad(a, u, left, false)
	return f + df
}

// Inv returns the head h >= 0 with F(h) = f: 0 for f <= 0. Above F(hMax) it
// inverts the continuation, or returns hMax when the top area is zero.
func (ht *HeadTransform) Inv(f float64) float64 {
	h, _ := ht.inv(f, -1)
	return h
}

// inv inverts F starting the interval search at hint (or, when hint < 0, at
// the interval that the bucket index fIdx gives for f) and returns the
// interval used, so that a monotone sweep costs O(1) per point and a lone
// call a few steps. The interval is the last one whose start node is <= f,
// as a bisection of the nodes would find.
func (ht *HeadTransform) inv(f float64, hint int) (float64, int) {
	if !(f > 0) {
		return 0, 0
	}
	if ht.constA > 0 {
		u := f / (2 * ht.constA)
		return u * u, 0
	}
	if f >= ht.fTop {
		if ht.aTop > 0 {
			u := ht.uMax + (f-ht.fTop)/(2*ht.aTop)
			return u * u, len(ht.poly) - 1
		}
		return ht.hMax, len(ht.poly) - 1
	}
	nodes := ht.fNode
	n := len(ht.poly)
	j := hint
	if j < 0 || j >= n {
		// no hint: start from the interval index of f's bucket, a few
		// intervals at most below the one sought
		j = int(ht.fIdx[min(int(f*ht.fIdxStep), len(ht.fIdx)-1)])
	}
	for j > 0 && nodes[j] > f {
		j--
	}
	for j < n-1 && nodes[j+1] <= f {
		j++
	}
	c := &ht.poly[j]
	span := nodes[j+1] - nodes[j]
	var t float64
	if span > 0 {
		t = (f - nodes[j]) / span
	}
	lo, hi := 0.0, 1.0
	for range 60 {
		p := c[0] + t*(c[1]+t*(c[2]+t*c[3])) - f
		if p == 0 {
			break
		}
		if p > 0 {
			hi = t
		} else {
			lo = t
		}
		dp := c[1] + t*(2*c[2]+3*t*c[3])
		tn := t - p/dp
		// 1e-12 of an interval is below 1e-15 of u: at the rounding level of p.
		if math.Abs(tn-t) <= 1e-12 {
			t = tn
			break
		}
		if !(tn > lo && tn < hi) { // also catches dp == 0 and NaN
			tn = 0.5 * (lo + hi)
		}
		t = tn
	}
	t = clamp(t, 0, 1)
	u := (float64(j) + t) * ht.du
	if j < directIntervals {
		// Polish on the directly integrated F (Newton in u, dF/du = 2A(u^2)).
		for range 8 {
			d := 2 * ht.area(u*u)
			if !(d > 0) {
				break
			}
			step := (ht.direct(u) - f) / d
			un := u - step
			if !(un > 0) {
				un = 0.5 * u
			}
			converged := math.Abs(un-u) <= 1e-15*u
			u = un
			if converged {
				break
			}
		}
	}
	return u * u, j
}

// invSlope returns dh/dF = sqrt(h)/A(h) at head h > 0, the sensitivity of
// the head to the transformed variable.
func (ht *HeadTransform) invSlope(headM float64) float64 {
	a := ht.AreaM2(headM)
	if !(a > 0) {
		return 0
	}
	return math.Sqrt(headM) / a
}

// logMoment returns L(h) = ∫_0^h A(s) ln(s)/sqrt(s) ds = -∂/∂n ∫_0^h A(s) s^-n ds
// at n = 1/2, used for the sensitivity of a drain to the outlet exponent.
func (ht *HeadTransform) logMoment(headM float64) float64 {
	if !(headM > 0) {
		return 0
	}
	u := math.Sqrt(headM)
	if ht.constA > 0 {
		return ht.constA * (2*u*math.Log(headM) - 4*u)
	}
	if u >= ht.uMax {
		return ht.lNode[len(ht.lNode)-1] + ht.aTop*(2*u*math.Log(headM)-4*u-(2*ht.uMax*math.Log(ht.hMax)-4*ht.uMax))
	}
	x := u * ht.invDu
	j := int(x)
	if j >= len(ht.poly) {
		j = len(ht.poly) - 1
	}
	t := x - float64(j)
	l0, l1 := ht.lNode[j], ht.lNode[j+1]
	if j == 0 {
		return l0 + t*(l1-l0) // the log slope is infinite at u = 0
	}
	d0, d1 := ht.lDer[j], ht.lDer[j+1]
	t2, t3 := t*t, t*t*t
	return (2*t3-3*t2+1)*l0 + (t3-2*t2+t)*d0 + (-2*t3+3*t2)*l1 + (t3-t2)*d1
}

// DrainHeadM returns the head at time tS (s) after the start of a clean
// drain from head h0M with outlet constant kM25s: Inv(F(h0) - K t), and 0
// once the tank is empty.
func (ht *HeadTransform) DrainHeadM(kM25s, h0M, tS float64) float64 {
	return ht.Inv(ht.F(h0M) - kM25s*tS)
}

// DrainTimeS returns the time (s) for a clean drain with outlet constant
// kM25s from head h0M down to h1M: (F(h0) - F(h1)) / K. A head h1 <= 0 means
// empty.
func (ht *HeadTransform) DrainTimeS(kM25s, h0M, h1M float64) float64 {
	return (ht.F(h0M) - ht.F(h1M)) / kM25s
}

// transformCache shares transforms between calls of the tank-level helpers.
// Only shapes of a comparable type are cached; the cache is emptied when it
// grows past transformCacheMax entries.
var transformCache struct {
	sync.Mutex
	m map[transformKey]*HeadTransform
}

type transformKey struct {
	shape Shape
	elev  float64
}

const transformCacheMax = 256

// TransformFor returns the head transform of a tank, building it on first
// use and caching it by (shape, outlet elevation) when the shape's type is
// comparable. It is safe for concurrent use.
func TransformFor(t *Tank) (*HeadTransform, error) {
	if t == nil || t.Shape == nil || !reflect.TypeOf(t.Shape).Comparable() {
		if t == nil {
			return nil, fmt.Errorf("model: nil tank")
		}
		return NewHeadTransform(t)
	}
	key := transformKey{t.Shape, t.OutletElevM}
	transformCache.Lock()
	ht, ok := transformCache.m[key]
	transformCache.Unlock()
	if ok {
		return ht, nil
	}
	ht, err := NewHeadTransform(t)
	if err != nil {
		return nil, err
	}
	transformCache.Lock()
	if transformCache.m == nil || len(transformCache.m) >= transformCacheMax {
		transformCache.m = make(map[transformKey]*HeadTransform)
	}
	transformCache.m[key] = ht
	transformCache.Unlock()
	return ht, nil
}

// DrainHeadM returns the head (m) at time tS (s) after the start of a clean
// drain of tank t from head h0M with outlet constant kM25s (m^2.5/s): the
// solution of A(h) dh/dt = -K sqrt(h), h(0) = h0, which is 0 once the tank
// is empty. It returns NaN for an invalid tank.
func DrainHeadM(t *Tank, kM25s, h0M, tS float64) float64 {
	ht, err := TransformFor(t)
	if err != nil {
		return math.NaN()
	}
	return ht.DrainHeadM(kM25s, h0M, tS)
}
