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
//	          L = c(r)                                    (raw signal, Calibration c, in m)
//	Pressure: L = (r - ZeroOffset) * UnitToSI / (ρ g_n)   (UnitToSI in Pa per unit)
//	          L = c(r) / (ρ g_n)                          (raw signal, Calibration c, in Pa)
//
// with ρ = DensityKgM3 and g_n = 9.80665 m/s^2, and the head is
// h = L - outletElevM. A pressure sensor reading in conventional metres of
// water (UnitToSI = 9806.65 Pa) therefore reads 1 m at 1000 kg/m^3 only; with
// water at 20 °C the level is 0.18 % higher than the reading.
//
// A raw transmitter signal (mA, V, counts, any reading unit) is converted by
// Calibration, which then replaces UnitToSI, SpanM and ZeroOffset (all 0):
// the calibration itself says what the empty vessel reads.
//
// The zero value is not usable; call Validate. A Sensor is a plain value and
// safe to share (a Calibration is immutable).
type Sensor struct {
	Kind        SensorKind
	UnitToSI    float64 // Depth: metres per reading unit; Pressure: pascals per reading unit. 0 with SpanM > 0 or a Calibration.
	ZeroOffset  float64 // reading, in the sensor's own unit, at zero level (empty vessel bottom); 0 with a Calibration
	DensityKgM3 float64 // liquid density for Pressure sensors; 0 means WaterDensity20CKgM3
	SpanM       float64 // Depth in percent: the level at 100 %, m; 0 otherwise
	// Calibration, when not nil, converts a raw reading to level (Depth, m)
	// or gauge pressure (Pressure, Pa); nil for readings in a length or
	// pressure unit or in percent of span.
	Calibration *Calibration
}

// Validate reports a sensor that cannot convert readings.
func (s Sensor) Validate() error {
	var errs []error
	if s.Calibration != nil {
		if s.UnitToSI != 0 || s.SpanM != 0 || s.ZeroOffset != 0 {
			errs = append(errs, errors.New("a sensor with a Calibration must leave UnitToSI, SpanM and ZeroOffset at 0"))
		}
		if s.Kind == Pressure && (s.DensityKgM3 < 0 || math.IsNaN(s.DensityKgM3) || math.IsInf(s.DensityKgM3, 0)) {
			errs = append(errs, errors.New("DensityKgM3 must be positive (or 0 for water at 20 °C)"))
		}
		if s.Kind != Depth && s.Kind != Pressure {
			errs = append(errs, fmt.Errorf("unknown sensor kind %d", int(s.Kind)))
		}
		if len(errs) > 0 {
			return fmt.Errorf("ingest: sensor: %w", errors.Join(errs...))
		}
		return nil
	}
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
		return s.UnitToSI / s.rhoG()
	default:
		if s.SpanM > 0 {
			return s.SpanM / 100
		}
		return s.UnitToSI
	}
}

// rhoG is ρ g_n, the gauge pressure per metre of liquid, Pa/m.
func (s Sensor) rhoG() float64 {
	rho := s.DensityKgM3
	if rho == 0 {
		rho = WaterDensity20CKgM3
	}
	return rho * model.StandardGravity
}

// HeadM converts one reading to head above the outlet (m); outletElevM is the
// outlet's elevation above the vessel bottom (m). A raw reading outside a
// calibration table is extrapolated (see Calibration).
func (s Sensor) HeadM(reading, outletElevM float64) float64 {
	if c := s.Calibration; c != nil {
		v := c.ValueSI(reading)
		if s.Kind == Pressure {
			v /= s.rhoG()
		}
		return v - outletElevM
	}
	return (reading-s.ZeroOffset)*s.metresPerUnit() - outletElevM
}

// Reading is the inverse of HeadM: the raw reading the sensor shows at head
// headM above an outlet at outletElevM.
func (s Sensor) Reading(headM, outletElevM float64) float64 {
	if c := s.Calibration; c != nil {
		v := headM + outletElevM
		if s.Kind == Pressure {
			v *= s.rhoG()
		}
		return c.Reading(v)
	}
	return (headM+outletElevM)/s.metresPerUnit() + s.ZeroOffset
}

// Calibration converts a raw transmitter reading r (mA, V, counts: any
// reading unit) to the quantity the sensor measures, in SI: the level above
// the vessel bottom in m for a Depth sensor, the gauge pressure in Pa for a
// Pressure sensor. It is immutable and safe for concurrent use.
//
// Linear (NewLinearCalibration, or NewTableCalibration with two points such
// as 4 mA = 0 m and 20 mA = 3.2 m):
//
//	c(r) = GainSI · r + OffsetSI
//
// Table (NewTableCalibration with three or more points (r_i, v_i)): a
// piecewise cubic Hermite curve through the points whose knot slopes are the
// weighted harmonic means of the neighbouring secants, d_i = (w1 + w2) /
// (w1/Δ_{i-1} + w2/Δ_i) with w1 = 2h_i + h_{i-1}, w2 = h_i + 2h_{i-1} (F. N.
// Fritsch and J. Butland, SIAM J. Sci. Stat. Comput. 5 (1984) 300-304), and
// the shape-preserving three-point formula at both ends. These slopes lie in
// the monotonicity region of F. N. Fritsch and R. E. Carlson, SIAM J. Numer.
// Anal. 17 (1980) 238-246, so the curve is monotone like the table: it never
// overshoots between points, every level has exactly one reading, and dc/dr
// is continuous, so a drain read through the table has no kink in its rate at
// each calibration point (as straight segments would give).
//
// Out of range: a reading beyond the first or last point is extrapolated
// along the straight line through the two end points. Clamping would turn a
// level beyond the table into a flat stretch that the sensor checks read as a
// stuck instrument and that cuts the end off drains, and dropping the reading
// would hide it; extrapolation keeps the series continuous and monotone.
// ReadingRange gives the calibrated range so that callers can flag readings
// outside it. A linear calibration is a straight line everywhere.
type Calibration struct {
	// Linear form: c(r) = gain·r + offset (len(r) == 0).
	gain, offset float64
	// Table form: readings strictly increasing, values strictly monotone,
	// slopes the Hermite derivatives at the knots.
	r, v, d []float64
}

// NewLinearCalibration returns c(r) = gainSI·r + offsetSI; gainSI is the SI
// quantity (m or Pa) per reading unit and may be negative (a distance-to-
// surface reading falls as the level rises), but not 0.
func NewLinearCalibration(gainSI, offsetSI float64) (*Calibration, error) {
	if gainSI == 0 || !finite(gainSI) || !finite(offsetSI) {
		return nil, fmt.Errorf("ingest: calibration: gain %g and offset %g: the gain must be finite and not 0, the offset finite", gainSI, offsetSI)
	}
	return &Calibration{gain: gainSI, offset: offsetSI}, nil
}

// NewTableCalibration builds a calibration from points (readings[i],
// valuesSI[i]): at least two, readings strictly increasing or strictly
// decreasing, values strictly increasing or strictly decreasing. Two points
// give the straight line through them; more give the monotone cubic
// described on Calibration. The slices are copied.
func NewTableCalibration(readings, valuesSI []float64) (*Calibration, error) {
	n := len(readings)
	if n != len(valuesSI) {
		return nil, fmt.Errorf("ingest: calibration: %d readings but %d values", n, len(valuesSI))
	}
	if n < 2 {
		return nil, fmt.Errorf("ingest: calibration: %d points, need at least 2", n)
	}
	r := append([]float64(nil), readings...)
	v := append([]float64(nil), valuesSI...)
	if r[1] < r[0] { // listed by falling reading: turn round
		for i, j := 0, n-1; i < j; i, j = i+1, j-1 {
			r[i], r[j] = r[j], r[i]
			v[i], v[j] = v[j], v[i]
		}
	}
	up := v[1] > v[0]
	for i := range n {
		if !finite(r[i]) || !finite(v[i]) {
			return nil, fmt.Errorf("ingest: calibration: point %d (%g, %g) is not finite", i, r[i], v[i])
		}
		if i == 0 {
			continue
		}
		if !(r[i] > r[i-1]) {
			return nil, fmt.Errorf("ingest: calibration: point %d: the readings are not strictly monotone (%g after %g)", i, r[i], r[i-1])
		}
		if v[i] == v[i-1] || (v[i] > v[i-1]) != up {
			return nil, fmt.Errorf("ingest: calibration: point %d: the values are not strictly monotone (%g after %g)", i, v[i], v[i-1])
		}
	}
	if n == 2 {
		g := (v[1] - v[0]) / (r[1] - r[0])
		return NewLinearCalibration(g, v[0]-g*r[0])
	}
	return &Calibration{r: r, v: v, d: hermiteSlopes(r, v)}, nil
}

// Linear reports whether c is a straight line, and its gain and offset.
func (c *Calibration) Linear() (gainSI, offsetSI float64, ok bool) {
	return c.gain, c.offset, len(c.r) == 0
}

// ReadingRange returns the lowest and highest reading of a table; readings
// outside it are extrapolated. A linear calibration returns -Inf, +Inf.
func (c *Calibration) ReadingRange() (lo, hi float64) {
	if len(c.r) == 0 {
		return math.Inf(-1), math.Inf(1)
	}
	return c.r[0], c.r[len(c.r)-1]
}

// ValueSI converts a reading to level (m) or pressure (Pa).
func (c *Calibration) ValueSI(reading float64) float64 {
	r := c.r
	n := len(r)
	if n == 0 {
		return c.gain*reading + c.offset
	}
	switch {
	case reading <= r[0]:
		return c.v[0] + (reading-r[0])*(c.v[1]-c.v[0])/(r[1]-r[0])
	case reading >= r[n-1]:
		return c.v[n-1] + (reading-r[n-1])*(c.v[n-1]-c.v[n-2])/(r[n-1]-r[n-2])
	}
	// The last knot at or below the reading (r[0] < reading < r[n-1]).
	lo, hi := 0, n-1
	for hi-lo > 1 {
		m := (lo + hi) / 2
		if r[m] <= reading {
			lo = m
		} else {
			hi = m
		}
	}
	return c.hermite(lo, reading)
}

// hermite evaluates the cubic of interval [r[i], r[i+1]] at x.
func (c *Calibration) hermite(i int, x float64) float64 {
	h := c.r[i+1] - c.r[i]
	t := (x - c.r[i]) / h
	t2, t3 := t*t, t*t*t
	return (2*t3-3*t2+1)*c.v[i] + (t3-2*t2+t)*h*c.d[i] + (-2*t3+3*t2)*c.v[i+1] + (t3-t2)*h*c.d[i+1]
}

// Reading is the inverse of ValueSI: the reading at which the calibration
// gives valueSI (extrapolated beyond the table like ValueSI).
func (c *Calibration) Reading(valueSI float64) float64 {
	r, v := c.r, c.v
	n := len(r)
	if n == 0 {
		return (valueSI - c.offset) / c.gain
	}
	up := v[n-1] > v[0]
	below := func(a, b float64) bool { return a < b == up } // a comes before b along the table
	switch {
	case !below(v[0], valueSI):
		return r[0] + (valueSI-v[0])*(r[1]-r[0])/(v[1]-v[0])
	case !below(valueSI, v[n-1]):
		return r[n-1] + (valueSI-v[n-1])*(r[n-1]-r[n-2])/(v[n-1]-v[n-2])
	}
	i := 0
	for i+2 < n && !below(valueSI, v[i+1]) {
		i++
	}
	// The cubic is monotone on its interval: bisect until the bracket
	// stops shrinking.
	a, b := r[i], r[i+1]
	for range 200 {
		m := a + (b-a)/2
		if m <= a || m >= b {
			break
		}
		if below(c.hermite(i, m), valueSI) {
			a = m
		} else {
			b = m
		}
	}
	return a + (b-a)/2
}

// hermiteSlopes returns the knot derivatives of the monotone cubic through
// strictly monotone data (x increasing, y increasing or decreasing).
func hermiteSlopes(x, y []float64) []float64 {
	n := len(x)
	h := make([]float64, n-1)
	del := make([]float64, n-1)
	for i := range n - 1 {
		h[i] = x[i+1] - x[i]
		del[i] = (y[i+1] - y[i]) / h[i]
	}
	d := make([]float64, n)
	for i := 1; i < n-1; i++ {
		// Strictly monotone data: del[i-1] and del[i] have the same sign
		// and are not 0, so the weighted harmonic mean is defined.
		w1, w2 := 2*h[i]+h[i-1], h[i]+2*h[i-1]
		d[i] = (w1 + w2) / (w1/del[i-1] + w2/del[i])
	}
	d[0] = endSlope(h[0], h[1], del[0], del[1])
	d[n-1] = endSlope(h[n-2], h[n-3], del[n-2], del[n-3])
	return d
}

// endSlope is the three-point end derivative from the end interval (h0,
// del0) and its neighbour (h1, del1), set to 0 when it points against the
// data and limited to 3·del0 so that the end interval stays monotone.
func endSlope(h0, h1, del0, del1 float64) float64 {
	d := ((2*h0+h1)*del0 - h0*del1) / (h0 + h1)
	switch {
	case math.Signbit(d) != math.Signbit(del0) || d == 0:
		return 0
	case math.Abs(d) > 3*math.Abs(del0):
		return 3 * del0
	}
	return d
}

func finite(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) }
