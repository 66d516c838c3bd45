package ingest

import (
	"errors"
	"fmt"
	"math"

	"drainsight/model"
)

// WaterDensity20CKgM3 is the density of air-free water at 20 °C and
// 101.325 kPa, kg/m^3, from the CIPM formula of Tanaka, Girard, Davis, Peuto
// & Bignell (2001), Metrologia 38:301-309 (998.2067455596...).
const WaterDensity20CKgM3 = 998.2067

// SensorKind tells what a level instrument measures.
type SensorKind int

const (
	// Depth sensors report the liquid level above the vessel bottom directly
	// (radar, ultrasonic, float, sight gauge), in a length unit or in percent
	// of a span.
	Depth SensorKind = iota + 1
	// Pressure sensors report the hydrostatic gauge pressure at the bottom.
	Pressure
)

func (k SensorKind) String() string {
	switch k {
	case Depth:
		return "depth"
	case Pressure:
		return "pressure"
	}
	return fmt.Sprintf("SensorKind(%d)", int(k))
}

// Sensor converts a level instrument's raw readings to head above the outlet.
//
// The level above the vessel bottom, in metres, is
//
//	Depth:    L = (r - ZeroOffset) * UnitToSI
//	          L = (r - ZeroOffset) * SpanM / 100          (percent of span, SpanM > 0)
//	Pressure: L = (r - ZeroOffset) * UnitToSI / (ρ g_n)   (UnitToSI in Pa per unit)
//
// with ρ = DensityKgM3 and g_n = 9.80665 m/s^2, and the head is
// h = L - outletElevM. A pressure sensor reading in conventional metres of
// water (UnitToSI = 9806.65 Pa) therefore reads 1 m at 1000 kg/m^3 only; with
// water at 20 °C the level is 0.18 % higher than the reading.
//
// The zero value is not usable; call Validate. A Sensor is a plain value and
// safe to share.
type Sensor struct {
	Kind        SensorKind
	UnitToSI    float64 // Depth: metres per reading unit; Pressure: pascals per reading unit. 0 with SpanM > 0.
	ZeroOffset  float64 // reading, in the sensor's own unit, at zero level (empty vessel bottom)
	DensityKgM3 float64 // liquid density for Pressure sensors; 0 means WaterDensity20CKgM3
	SpanM       float64 // Depth in percent: the level at 100 %, m; 0 otherwise
}

// Validate reports a sensor that cannot convert readings.
func (s Sensor) Validate() error {
	var errs []error
	switch s.Kind {
	case Depth:
		if s.SpanM > 0 && s.UnitToSI != 0 {
			errs = append(errs, errors.New("percent sensor (SpanM > 0) must leave UnitToSI at 0"))
		}
		if s.SpanM == 0 && !(s.UnitToSI > 0) {
			errs = append(errs, errors.New("UnitToSI must be positive"))
		}
	case Pressure:
		if !(s.UnitToSI > 0) {
			errs = append(errs, errors.New("UnitToSI must be positive"))
		}
		if s.SpanM != 0 {
			errs = append(errs, errors.New("SpanM applies to depth sensors only"))
		}
		if s.DensityKgM3 < 0 || math.IsNaN(s.DensityKgM3) || math.IsInf(s.DensityKgM3, 0) {
			errs = append(errs, errors.New("DensityKgM3 must be positive (or 0 for water at 20 °C)"))
		}
	default:
		errs = append(errs, fmt.Errorf("unknown sensor kind %d", int(s.Kind)))
	}
	if s.SpanM < 0 || math.IsNaN(s.SpanM) || math.IsInf(s.SpanM, 0) {
		errs = append(errs, errors.New("SpanM must not be negative"))
	}
	if math.IsNaN(s.ZeroOffset) || math.IsInf(s.ZeroOffset, 0) || math.IsInf(s.UnitToSI, 0) {
		errs = append(errs, errors.New("ZeroOffset and UnitToSI must be finite"))
	}
	if len(errs) > 0 {
		return fmt.Errorf("ingest: sensor: %w", errors.Join(errs...))
	}
	return nil
}

// metresPerUnit is dL/dr, the level change per reading unit.
func (s Sensor) metresPerUnit() float64 {
	switch s.Kind {
	case Pressure:
		rho := s.DensityKgM3
		if rho == 0 {
			rho = WaterDensity20CKgM3
		}
		return s.UnitToSI / (rho * model.StandardGravity)
	default:
		if s.SpanM > 0 {
			return s.SpanM / 100
		}
		return s.UnitToSI
	}
}

// HeadM converts one reading to head above the outlet (m); outletElevM is the
// outlet's elevation above the vessel bottom (m).
func (s Sensor) HeadM(reading, outletElevM float64) float64 {
	return (reading-s.ZeroOffset)*s.metresPerUnit() - outletElevM
}

// Reading is the inverse of HeadM: the raw reading the sensor shows at head
// headM above an outlet at outletElevM.
func (s Sensor) Reading(headM, outletElevM float64) float64 {
	return (headM+outletElevM)/s.metresPerUnit() + s.ZeroOffset
}
