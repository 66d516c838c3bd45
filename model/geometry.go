package model

import (
	"fmt"
	"math"
)

// This file holds the vessel shapes. Every shape measures its level from the
// lowest internal point, clamps levels to [0, HeightM], and keeps AreaM2 and
// VolumeM3 consistent: VolumeM3(h) = ∫_0^h AreaM2(s) ds (plus the volume at
// level 0 for a strapping table that starts with a sump).

// positive checks name/value pairs for "positive and finite".
func positive(shape string, kv ...any) error {
	for i := 0; i+1 < len(kv); i += 2 {
		name, _ := kv[i].(string)
		v, _ := kv[i+1].(float64)
		if !(v > 0) || math.IsInf(v, 0) {
			return fmt.Errorf("model: %s: %s %g m is not positive and finite", shape, name, v)
		}
	}
	return nil
}

// Rectangular is a flat-bottomed box with vertical walls.
type Rectangular struct {
	LengthM         float64
	WidthM          float64
	InternalHeightM float64
}

// AreaM2 implements Shape: L*W at every level.
func (r Rectangular) AreaM2(float64) float64 { return r.LengthM * r.WidthM }

// VolumeM3 implements Shape: L*W*h.
func (r Rectangular) VolumeM3(levelM float64) float64 {
	return r.LengthM * r.WidthM * clamp(levelM, 0, r.InternalHeightM)
}

// HeightM implements Shape.
func (r Rectangular) HeightM() float64 { return r.InternalHeightM }

// Validate reports a non-positive dimension.
func (r Rectangular) Validate() error {
	return positive("rectangular tank", "length", r.LengthM, "width", r.WidthM, "internal height", r.InternalHeightM)
}

// HorizontalCylinder is a cylinder lying on its side with flat ends. With R
// the radius, L the length and h the level:
//
//	A(h) = 2 L sqrt(h (2R - h))
//	V(h) = L [R^2 acos((R-h)/R) - (R-h) sqrt(2 R h - h^2)]
type HorizontalCylinder struct {
	DiameterM float64
	LengthM   float64
}

// AreaM2 implements Shape.
func (c HorizontalCylinder) AreaM2(levelM float64) float64 {
	h := clamp(levelM, 0, c.DiameterM)
	return 2 * c.LengthM * math.Sqrt(h*(c.DiameterM-h))
}

// VolumeM3 implements Shape. The circular segment is computed from its
// half-angle so that it keeps full relative precision near empty and full.
func (c HorizontalCylinder) VolumeM3(levelM float64) float64 {
	r := c.DiameterM / 2
	h := clamp(levelM, 0, c.DiameterM)
	if h > r {
		return c.LengthM*math.Pi*r*r - c.LengthM*circularSegment(r, c.DiameterM-h)
	}
	return c.LengthM * circularSegment(r, h)
}

// circularSegment is the area of a circle of radius r below a chord at
// depth h <= r: r^2/2 (phi - sin phi) with phi = 4 asin(sqrt(h/2r)).
func circularSegment(r, h float64) float64 {
	phi := 4 * math.Asin(math.Sqrt(h/(2*r)))
	var d float64
	if phi < 1e-2 {
		p2 := phi * phi
		d = phi * p2 / 6 * (1 - p2/20*(1-p2/42))
	} else {
		d = phi - math.Sin(phi)
	}
	return 0.5 * r * r * d
}

// HeightM implements Shape.
func (c HorizontalCylinder) HeightM() float64 { return c.DiameterM }

// Validate reports a non-positive dimension.
func (c HorizontalCylinder) Validate() error {
	return positive("horizontal cylinder", "diameter", c.DiameterM, "length", c.LengthM)
}

// Sphere is a spherical vessel. With R the radius and h the level:
//
//	A(h) = pi (2 R h - h^2),  V(h) = pi h^2 (3R - h) / 3
type Sphere struct {
	DiameterM float64
}

// AreaM2 implements Shape.
func (s Sphere) AreaM2(levelM float64) float64 {
	h := clamp(levelM, 0, s.DiameterM)
	return math.Pi * h * (s.DiameterM - h)
}

// VolumeM3 implements Shape.
func (s Sphere) VolumeM3(levelM float64) float64 {
	h := clamp(levelM, 0, s.DiameterM)
	return math.Pi * h * h * (1.5*s.DiameterM - h) / 3
}

// HeightM implements Shape.
func (s Sphere) HeightM() float64 { return s.DiameterM }

// Validate reports a non-positive diameter.
func (s Sphere) Validate() error { return positive("sphere", "diameter", s.DiameterM) }

// ConeBottomCylinder is an upright cylinder on a conical bottom whose vertex
// points down and sits at level 0. With R the radius and Hc the cone height:
//
//	A(h) = pi R^2 (h/Hc)^2,            V(h) = pi R^2 h^3 / (3 Hc^2)           for h <= Hc
//	A(h) = pi R^2,                     V(h) = pi R^2 (Hc/3 + h - Hc)          above
type ConeBottomCylinder struct {
	DiameterM       float64
	CylinderHeightM float64
	ConeHeightM     float64
}

// AreaM2 implements Shape.
func (c ConeBottomCylinder) AreaM2(levelM float64) float64 {
	a := 0.25 * math.Pi * c.DiameterM * c.DiameterM
	h := clamp(levelM, 0, c.HeightM())
	if h < c.ConeHeightM {
		x := h / c.ConeHeightM
		return a * x * x
	}
	return a
}

// VolumeM3 implements Shape.
func (c ConeBottomCylinder) VolumeM3(levelM float64) float64 {
	a := 0.25 * math.Pi * c.DiameterM * c.DiameterM
	h := clamp(levelM, 0, c.HeightM())
	if h < c.ConeHeightM {
		x := h / c.ConeHeightM
		return a * c.ConeHeightM * x * x * x / 3
	}
	return a * (c.ConeHeightM/3 + h - c.ConeHeightM)
}

// HeightM implements Shape: cone plus cylinder.
func (c ConeBottomCylinder) HeightM() float64 { return c.ConeHeightM + c.CylinderHeightM }

// Validate reports a non-positive diameter or cone height, or a negative
// cylinder height.
func (c ConeBottomCylinder) Validate() error {
	if err := positive("cone-bottom cylinder", "diameter", c.DiameterM, "cone height", c.ConeHeightM); err != nil {
		return err
	}
	if !(c.CylinderHeightM >= 0) || math.IsInf(c.CylinderHeightM, 0) {
		return fmt.Errorf("model: cone-bottom cylinder: cylinder height %g m is not finite and non-negative", c.CylinderHeightM)
	}
	return nil
}

// StrappingTable is a vessel described by measured (level, volume) pairs.
// The volume is interpolated by a monotone piecewise cubic Hermite curve
// (PCHIP: Fritsch-Carlson monotonicity with the Fritsch-Butland weighted
// harmonic-mean slopes), so V is non-decreasing and C^1, and the area is its
// exact derivative, A(h) = dV/dh, which is continuous and non-negative.
// Build one with NewStrappingTable; it is immutable and safe to share.
type StrappingTable struct {
	levels  []float64
	volumes []float64
	slopes  []float64 // dV/dh at each knot, m^2
}

// NewStrappingTable checks and builds a strapping table. levelsM must start
// at 0 (the lowest internal point) and be strictly increasing; volumesM3 must
// be finite, non-negative and non-decreasing, with the last volume above the
// first. At least two points are needed. Errors name the offending point.
func NewStrappingTable(levelsM, volumesM3 []float64) (*StrappingTable, error) {
	n := len(levelsM)
	if n != len(volumesM3) {
		return nil, fmt.Errorf("model: strapping table: %d levels but %d volumes", n, len(volumesM3))
	}
	if n < 2 {
		return nil, fmt.Errorf("model: strapping table: %d points, need at least 2", n)
	}
	for i := range n {
		l, v := levelsM[i], volumesM3[i]
		switch {
		case math.IsNaN(l) || math.IsInf(l, 0):
			return nil, fmt.Errorf("model: strapping table: point %d: level %g is not finite", i, l)
		case math.IsNaN(v) || math.IsInf(v, 0):
			return nil, fmt.Errorf("model: strapping table: point %d: volume %g is not finite", i, v)
		case v < 0:
			return nil, fmt.Errorf("model: strapping table: point %d: volume %g m^3 is negative", i, v)
		case i == 0 && l != 0:
			return nil, fmt.Errorf("model: strapping table: point 0: level %g m, the table must start at level 0", l)
		case i > 0 && !(l > levelsM[i-1]):
			return nil, fmt.Errorf("model: strapping table: point %d: level %g m is not above the previous level %g m", i, l, levelsM[i-1])
		case i > 0 && v < volumesM3[i-1]:
			return nil, fmt.Errorf("model: strapping table: point %d: volume %g m^3 is below the previous volume %g m^3", i, v, volumesM3[i-1])
		}
	}
	if !(volumesM3[n-1] > volumesM3[0]) {
		return nil, fmt.Errorf("model: strapping table: point %d: volume %g m^3 is not above the first volume", n-1, volumesM3[n-1])
	}
	st := &StrappingTable{
		levels:  append([]float64(nil), levelsM...),
		volumes: append([]float64(nil), volumesM3...),
		slopes:  pchipSlopes(levelsM, volumesM3),
	}
	return st, nil
}

// pchipSlopes returns Fritsch-Butland derivatives at the knots of monotone data.
func pchipSlopes(x, y []float64) []float64 {
	n := len(x)
	d := make([]float64, n)
	if n == 2 {
		s := (y[1] - y[0]) / (x[1] - x[0])
		d[0], d[1] = s, s
		return d
	}
	h := make([]float64, n-1)
	del := make([]float64, n-1)
	for k := range n - 1 {
		h[k] = x[k+1] - x[k]
		del[k] = (y[k+1] - y[k]) / h[k]
	}
	for k := 1; k < n-1; k++ {
		if del[k-1]*del[k] <= 0 {
			continue
		}
		w1, w2 := 2*h[k]+h[k-1], h[k]+2*h[k-1]
		d[k] = (w1 + w2) / (w1/del[k-1] + w2/del[k])
	}
	d[0] = pchipEnd(h[0], h[1], del[0], del[1])
	d[n-1] = pchipEnd(h[n-2], h[n-3], del[n-2], del[n-3])
	return d
}

// pchipEnd is the shape-preserving three-point end slope.
func pchipEnd(h0, h1, d0, d1 float64) float64 {
	s := ((2*h0+h1)*d0 - h0*d1) / (h0 + h1)
	switch {
	case s*d0 <= 0:
		return 0
	case d0*d1 <= 0 && math.Abs(s) > math.Abs(3*d0):
		return 3 * d0
	}
	return s
}

// interval returns k with levels[k] <= h < levels[k+1] (clamped) and the
// local coordinate.
func (s *StrappingTable) interval(levelM float64) (int, float64, float64) {
	n := len(s.levels)
	h := clamp(levelM, 0, s.levels[n-1])
	lo, hi := 0, n-1
	for hi-lo > 1 {
		mid := (lo + hi) / 2
		if s.levels[mid] <= h {
			lo = mid
		} else {
			hi = mid
		}
	}
	dx := s.levels[lo+1] - s.levels[lo]
	return lo, (h - s.levels[lo]) / dx, dx
}

// VolumeM3 implements Shape.
func (s *StrappingTable) VolumeM3(levelM float64) float64 {
	k, t, dx := s.interval(levelM)
	t2, t3 := t*t, t*t*t
	h00 := 2*t3 - 3*t2 + 1
	h10 := t3 - 2*t2 + t
	h01 := -2*t3 + 3*t2
	h11 := t3 - t2
	return h00*s.volumes[k] + h10*dx*s.slopes[k] + h01*s.volumes[k+1] + h11*dx*s.slopes[k+1]
}

// AreaM2 implements Shape: the derivative of the volume curve.
func (s *StrappingTable) AreaM2(levelM float64) float64 {
	k, t, dx := s.interval(levelM)
	t2 := t * t
	d00 := (6*t2 - 6*t) / dx
	d10 := 3*t2 - 4*t + 1
	d01 := (-6*t2 + 6*t) / dx
	d11 := 3*t2 - 2*t
	a := d00*s.volumes[k] + d10*s.slopes[k] + d01*s.volumes[k+1] + d11*s.slopes[k+1]
	return math.Max(a, 0)
}

// HeightM implements Shape: the last level of the table.
func (s *StrappingTable) HeightM() float64 { return s.levels[len(s.levels)-1] }

// Points returns copies of the table's levels (m) and volumes (m^3).
func (s *StrappingTable) Points() (levelsM, volumesM3 []float64) {
	return append([]float64(nil), s.levels...), append([]float64(nil), s.volumes...)
}

// levelBreaks lists the levels where the area is not smooth; the head
// transform splits its quadrature there.
func (c ConeBottomCylinder) levelBreaks() []float64 { return []float64{c.ConeHeightM} }

func (s *StrappingTable) levelBreaks() []float64 { return s.levels }
