package model

import (
	"fmt"
	"math"
)

// Shape is a vessel's geometry measured from its lowest internal point.
// Implementations must be consistent: VolumeM3 is the integral of AreaM2, and
// both are non-decreasing in level (volume) and non-negative (area). Levels
// outside [0, HeightM] are clamped.
type Shape interface {
	// AreaM2 is the free-surface (plan) area at the given level, m^2.
	AreaM2(levelM float64) float64
	// VolumeM3 is the liquid volume below the given level, m^3.
	VolumeM3(levelM float64) float64
	// HeightM is the internal height of the vessel, m.
	HeightM() float64
}

// Tank is what the physics needs to know about one tank.
//
// OutletElevM is the elevation of the outlet above the vessel bottom (m);
// liquid below it does not drain. OutletDiamM is the outlet bore (m), 0 when
// unknown. DesignCd is the design discharge coefficient (0 when not given).
// DatumKnown is false when the outlet elevation is only nominal: the fit then
// estimates the datum offset per drain. SensorLagS is the first-order time
// constant of the level reading (transmitter damping plus any stilling
// well), s; 0 when the reading follows the level (see lagNormal).
type Tank struct {
	ID          string
	Shape       Shape
	OutletElevM float64
	OutletDiamM float64
	DesignCd    float64
	DatumKnown  bool
	SensorLagS  float64
}

// AreaAtHeadM2 is the free-surface area at head h above the outlet, m^2.
func (t *Tank) AreaAtHeadM2(headM float64) float64 {
	return t.Shape.AreaM2(headM + t.OutletElevM)
}

// DrainableHeightM is the largest head above the outlet, m.
func (t *Tank) DrainableHeightM() float64 {
	return t.Shape.HeightM() - t.OutletElevM
}

// VerticalCylinder is a flat-bottomed upright cylinder.
type VerticalCylinder struct {
	DiameterM       float64
	InternalHeightM float64
}

func (c VerticalCylinder) area() float64 { return 0.25 * 3.141592653589793 * c.DiameterM * c.DiameterM }

// AreaM2 implements Shape.
func (c VerticalCylinder) AreaM2(float64) float64 { return c.area() }

// VolumeM3 implements Shape.
func (c VerticalCylinder) VolumeM3(levelM float64) float64 {
	return c.area() * clamp(levelM, 0, c.InternalHeightM)
}

// HeightM implements Shape.
func (c VerticalCylinder) HeightM() float64 { return c.InternalHeightM }

func clamp(x, lo, hi float64) float64 {
	if x < lo {
		return lo
	}
	if x > hi {
		return hi
	}
	return x
}

// Validate checks that the tank can be fitted: a shape with a positive,
// finite height, an outlet at or above the bottom and below the top, and a
// non-negative outlet bore. A shape with its own Validate method is checked
// too. Errors name the tank and the field.
func (t *Tank) Validate() error {
	if t.Shape == nil {
		return fmt.Errorf("model: tank %q: no shape", t.ID)
	}
	if v, ok := t.Shape.(interface{ Validate() error }); ok {
		if err := v.Validate(); err != nil {
			return fmt.Errorf("model: tank %q: %w", t.ID, err)
		}
	}
	h := t.Shape.HeightM()
	if !(h > 0) || math.IsInf(h, 0) {
		return fmt.Errorf("model: tank %q: shape height %g m is not positive and finite", t.ID, h)
	}
	if !(t.OutletElevM >= 0) || !(t.OutletElevM < h) {
		return fmt.Errorf("model: tank %q: outlet elevation %g m is outside [0, %g) m", t.ID, t.OutletElevM, h)
	}
	if !(t.OutletDiamM >= 0) || math.IsInf(t.OutletDiamM, 0) {
		return fmt.Errorf("model: tank %q: outlet diameter %g m is not a finite non-negative number", t.ID, t.OutletDiamM)
	}
	return nil
}

// Validate implements the optional shape check used by Tank.Validate.
func (c VerticalCylinder) Validate() error {
	return positive("vertical cylinder", "diameter", c.DiameterM, "internal height", c.InternalHeightM)
}
