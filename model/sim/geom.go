package sim

import (
	"math"

	"drainsight/model"
)

// geom holds the simulator's own tables of the head transform F and the
// volume above the outlet for one tank (independent of package model's
// transform, so that tests comparing the two check something).
type geom struct {
	shape model.Shape
	elev  float64
	hMax  float64
	dv    float64   // grid step in v = sqrt(h)
	f     []float64 // F at v = j dv
	v0    float64   // volume below the outlet
}

const geomNodes = 2048

// Gauss-Legendre 4-point nodes and weights on [-1, 1] (Abramowitz & Stegun
// Table 25.4).
var glX = [4]float64{-0.8611363115940526, -0.3399810435848563, 0.3399810435848563, 0.8611363115940526}
var glW = [4]float64{0.3478548451374538, 0.6521451548625461, 0.6521451548625461, 0.3478548451374538}

func newGeom(t *model.Tank) *geom {
	g := &geom{shape: t.Shape, elev: t.OutletElevM, hMax: t.DrainableHeightM()}
	g.v0 = g.shape.VolumeM3(g.elev)
	g.dv = math.Sqrt(g.hMax) / geomNodes
	g.f = make([]float64, geomNodes+1)
	for j := 1; j <= geomNodes; j++ {
		g.f[j] = g.f[j-1] + g.quad(float64(j-1)*g.dv, float64(j)*g.dv)
	}
	return g
}

// area at head h (m^2).
func (g *geom) area(h float64) float64 { return g.shape.AreaM2(h + g.elev) }

// quad is ∫_a^b 2 A(v²) dv.
func (g *geom) quad(a, b float64) float64 {
	c, r := 0.5*(a+b), 0.5*(b-a)
	s := 0.0
	for k := range glX {
		v := c + r*glX[k]
		s += glW[k] * 2 * g.area(v*v)
	}
	return s * r
}

// F is the head transform at head h (m^2.5 ... m^2 m^0.5).
func (g *geom) F(h float64) float64 {
	if h <= 0 {
		return 0
	}
	h = min(h, g.hMax)
	v := math.Sqrt(h)
	j := min(int(v/g.dv), geomNodes-1)
	return g.f[j] + g.quad(float64(j)*g.dv, v)
}

// invF is the head whose transform is f (0 for f ≤ 0, hMax above the top).
func (g *geom) invF(f float64) float64 {
	if f <= 0 {
		return 0
	}
	if f >= g.f[geomNodes] {
		return g.hMax
	}
	lo, hi := 0, geomNodes
	for hi-lo > 1 {
		m := (lo + hi) / 2
		if g.f[m] <= f {
			lo = m
		} else {
			hi = m
		}
	}
	base := float64(lo) * g.dv
	a, b := base, float64(hi)*g.dv
	v := a + (b-a)*(f-g.f[lo])/(g.f[hi]-g.f[lo])
	for range 60 {
		r := g.f[lo] + g.quad(base, v) - f
		if r > 0 {
			b = v
		} else {
			a = v
		}
		d := 2 * g.area(v*v)
		nv := v - r/d
		if !(d > 0) || nv <= a || nv >= b {
			nv = 0.5 * (a + b)
		}
		if math.Abs(nv-v) <= 1e-15*max(v, 1e-300) || b-a < 1e-15 {
			v = nv
			break
		}
		v = nv
	}
	return v * v
}

// vol is the volume above the outlet at head h (m^3).
func (g *geom) vol(h float64) float64 {
	return g.shape.VolumeM3(max(h, 0)+g.elev) - g.v0
}

// head is the inverse of vol (safeguarded Newton).
func (g *geom) head(v float64) float64 {
	if v <= 0 {
		return 0
	}
	top := g.vol(g.hMax)
	if v >= top {
		return g.hMax
	}
	a, b := 0.0, g.hMax
	h := g.hMax * v / top
	for range 80 {
		r := g.vol(h) - v
		if r > 0 {
			b = h
		} else {
			a = h
		}
		d := g.area(h)
		nh := h - r/d
		if !(d > 0) || nh <= a || nh >= b {
			nh = 0.5 * (a + b)
		}
		if math.Abs(nh-h) <= 1e-14*max(h, 1e-12) || b-a < 1e-14 {
			return nh
		}
		h = nh
	}
	return h
}

// volSigned is vol extended below the outlet: the (negative) volume between
// the outlet and head h < 0, down to the vessel bottom at h = -elev.
func (g *geom) volSigned(h float64) float64 {
	if h >= 0 {
		return g.vol(h)
	}
	return g.shape.VolumeM3(max(h+g.elev, 0)) - g.v0
}

// headSigned is the inverse of volSigned: below the outlet (v < 0) the head
// is found by bisection between the vessel bottom and the outlet.
func (g *geom) headSigned(v float64) float64 {
	if v >= 0 || !(g.elev > 0) {
		return g.head(v)
	}
	if v <= -g.v0 {
		return -g.elev
	}
	a, b := -g.elev, 0.0
	for range 100 {
		m := 0.5 * (a + b)
		if g.volSigned(m) > v {
			b = m
		} else {
			a = m
		}
		if b-a < 1e-13 {
			break
		}
	}
	return 0.5 * (a + b)
}
