package ingest

import (
	"math"
	"strings"
	"testing"
)

func TestSensorHeadM(t *testing.T) {
	tests := []struct {
		name    string
		s       Sensor
		reading float64
		outlet  float64
		want    float64
		tol     float64
	}{
		// 812 mm - 12 mm zero = 0.800 m level, outlet at 0.1 m.
		{"depth mm with zero", Sensor{Kind: Depth, UnitToSI: 1e-3, ZeroOffset: 12}, 812, 0.1, 0.7, 1e-12},
		// 1 ft = 0.3048 m exactly (NIST SP 811, Appendix B.8).
		{"depth ft", Sensor{Kind: Depth, UnitToSI: 0.3048}, 10, 0.048, 3.0, 1e-12},
		// 1 in = 0.0254 m exactly (NIST SP 811, Appendix B.8).
		{"depth in", Sensor{Kind: Depth, UnitToSI: 0.0254}, 100, 0, 2.54, 1e-12},
		{"percent of 4 m span", Sensor{Kind: Depth, SpanM: 4}, 50, 0.5, 1.5, 1e-12},
		{"percent with zero offset", Sensor{Kind: Depth, SpanM: 4, ZeroOffset: 2}, 27, 0, 1.0, 1e-12},
		// Conventional metre of water = 9806.65 Pa = 1000 kg/m^3 · g_n, so at
		// 1000 kg/m^3 the level equals the reading.
		{"mH2O at 1000 kg/m3", Sensor{Kind: Pressure, UnitToSI: 9806.65, DensityKgM3: 1000}, 2.5, 0, 2.5, 1e-12},
		// Same reading, water at 20 °C (998.2067 kg/m^3, Tanaka et al. 2001):
		// 2.5 · 1000/998.2067 = 2.5044913042559 (computed).
		{"mH2O at 20 C", Sensor{Kind: Pressure, UnitToSI: 9806.65}, 2.5, 0, 2.5044913042559, 1e-12},
		// 12.5 kPa / (998.2067 · 9.80665) = 1.2769351941060 m (computed).
		{"kPa at 20 C", Sensor{Kind: Pressure, UnitToSI: 1000}, 12.5, 0, 1.2769351941060, 1e-12},
		// 1 psi = 6894.757 Pa (NIST SP 811, Appendix B.8, to 7 digits);
		// 6894.757 / 9806.65 = 0.70306954974 m of water at 1000 kg/m^3 (computed).
		{"psi at 1000 kg/m3", Sensor{Kind: Pressure, UnitToSI: 6894.757, DensityKgM3: 1000}, 1, 0, 0.70306954974, 1e-10},
		// 1 bar = 1e5 Pa exactly; 0.2 bar with a 0.01 bar zero offset, brine of 1200 kg/m^3:
		// 19000 / (1200 · 9.80665) = 1.6145438826... m (computed), outlet 0.2 m.
		{"bar brine", Sensor{Kind: Pressure, UnitToSI: 1e5, ZeroOffset: 0.01, DensityKgM3: 1200}, 0.2, 0.2, 19000/(1200*9.80665) - 0.2, 1e-12},
		{"below outlet is negative", Sensor{Kind: Depth, UnitToSI: 1}, 0.05, 0.1, -0.05, 1e-12},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			if err := tc.s.Validate(); err != nil {
				t.Fatalf("Validate: %v", err)
			}
			got := tc.s.HeadM(tc.reading, tc.outlet)
			if math.Abs(got-tc.want) > tc.tol {
				t.Errorf("HeadM(%v, %v) = %.15g, want %.15g", tc.reading, tc.outlet, got, tc.want)
			}
			back := tc.s.Reading(got, tc.outlet)
			if math.Abs(back-tc.reading) > 1e-12*math.Max(1, math.Abs(tc.reading)) {
				t.Errorf("Reading(HeadM(r)) = %.15g, want %.15g", back, tc.reading)
			}
		})
	}
}

func TestSensorValidate(t *testing.T) {
	bad := []Sensor{
		{},
		{Kind: Depth},
		{Kind: Depth, UnitToSI: 1, SpanM: 3},
		{Kind: Pressure},
		{Kind: Pressure, UnitToSI: 1000, DensityKgM3: -1},
		{Kind: Pressure, UnitToSI: 1000, SpanM: 2},
		{Kind: Depth, UnitToSI: 1, ZeroOffset: math.NaN()},
		{Kind: Depth, SpanM: math.Inf(1)},
		{Kind: 7, UnitToSI: 1},
	}
	for i, s := range bad {
		if err := s.Validate(); err == nil {
			t.Errorf("case %d: Validate(%+v) = nil, want an error", i, s)
		}
	}
}

func mustLinear(t *testing.T, gain, offset float64) *Calibration {
	t.Helper()
	c, err := NewLinearCalibration(gain, offset)
	if err != nil {
		t.Fatal(err)
	}
	return c
}

func mustTable(t *testing.T, r, v []float64) *Calibration {
	t.Helper()
	c, err := NewTableCalibration(r, v)
	if err != nil {
		t.Fatal(err)
	}
	return c
}

func TestSensorRawSignal(t *testing.T) {
	// 4-20 mA is the analogue signal range of IEC 60381-1; 4 mA = 0 m and
	// 20 mA = 3.2 m give 0.2 m/mA and -0.8 m at 0 mA (computed).
	loop := mustTable(t, []float64{4, 20}, []float64{0, 3.2})
	// The same transmitter as gain and offset.
	loopGO := mustLinear(t, 0.2, -0.8)
	// 4 mA = 0 kPa, 20 mA = 50 kPa on a pressure transmitter (3125 Pa/mA).
	loopKPa := mustTable(t, []float64{4, 20}, []float64{0, 50e3})
	// A 12-bit converter, 0-4095 counts over 0-2.5 m (common practice).
	counts := mustLinear(t, 2.5/4095, 0)
	// A distance-to-surface reading (m below a nozzle 3.0 m above the
	// bottom): the level falls as the reading rises (gain -1).
	distance := mustLinear(t, -1, 3.0)
	tests := []struct {
		name    string
		s       Sensor
		reading float64
		outlet  float64
		want    float64
	}{
		{"two-point 4 mA is empty", Sensor{Kind: Depth, Calibration: loop}, 4, 0, 0},
		{"two-point 12 mA is mid span", Sensor{Kind: Depth, Calibration: loop}, 12, 0, 1.6},
		{"two-point 20 mA is full span", Sensor{Kind: Depth, Calibration: loop}, 20, 0.1, 3.1},
		// Below 4 mA the line is extrapolated: 3.8 mA reads -0.04 m (computed).
		{"two-point under range extrapolates", Sensor{Kind: Depth, Calibration: loop}, 3.8, 0, -0.04},
		// 20.5 mA reads 3.3 m (computed).
		{"two-point over range extrapolates", Sensor{Kind: Depth, Calibration: loop}, 20.5, 0, 3.3},
		{"gain and offset equal the two points", Sensor{Kind: Depth, Calibration: loopGO}, 12, 0.1, 1.5},
		// 2048 counts · 2.5/4095 m = 1.2503052503052503 m (computed).
		{"counts", Sensor{Kind: Depth, Calibration: counts}, 2048, 0, 2048 * 2.5 / 4095},
		{"distance to surface", Sensor{Kind: Depth, Calibration: distance}, 0.75, 0.25, 2.0},
		// 12 mA = 25 kPa; 25000 / (1000 · 9.80665) = 2.5492905324448 m (computed).
		{"mA pressure at 1000 kg/m3", Sensor{Kind: Pressure, Calibration: loopKPa, DensityKgM3: 1000}, 12, 0, 2.5492905324448},
		// 25000 / (998.2067 · 9.80665) = 2.5537703882121 m (computed).
		{"mA pressure at 20 C", Sensor{Kind: Pressure, Calibration: loopKPa}, 12, 0, 25000 / (998.2067 * 9.80665)},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			if err := tc.s.Validate(); err != nil {
				t.Fatalf("Validate: %v", err)
			}
			got := tc.s.HeadM(tc.reading, tc.outlet)
			if math.Abs(got-tc.want) > 1e-12 {
				t.Errorf("HeadM(%v, %v) = %.15g, want %.15g", tc.reading, tc.outlet, got, tc.want)
			}
			back := tc.s.Reading(got, tc.outlet)
			if math.Abs(back-tc.reading) > 1e-12*math.Max(1, math.Abs(tc.reading)) {
				t.Errorf("Reading(HeadM(r)) = %.15g, want %.15g", back, tc.reading)
			}
		})
	}
}

func TestCalibrationTable(t *testing.T) {
	// v = r² sampled at r = 0..4: knot slopes 0, 3/2, 15/4, 35/6, 8 and the
	// values below, computed by hand in exact fractions from the
	// Fritsch-Butland slopes and the three-point end formula.
	square := mustTable(t, []float64{0, 1, 2, 3, 4}, []float64{0, 1, 4, 9, 16})
	// A nonlinear transmitter in counts (invented data): computed the same way.
	nonlin := mustTable(t, []float64{0, 1000, 2000, 4000}, []float64{0, 0.30, 0.75, 2.0})
	// The same table listed by falling reading gives the same curve.
	nonlinRev := mustTable(t, []float64{4000, 2000, 1000, 0}, []float64{2.0, 0.75, 0.30, 0})
	// A distance reading: level falls as the reading rises (invented data).
	falling := mustTable(t, []float64{0.2, 1.0, 2.0, 2.8}, []float64{2.8, 2.0, 1.0, 0.2})
	// Points on a straight line: the interpolant is that line (the harmonic
	// mean of equal secants is the secant; computed).
	line := mustTable(t, []float64{1, 2, 4, 7}, []float64{0.1, 0.3, 0.7, 1.3})
	tests := []struct {
		name    string
		c       *Calibration
		reading float64
		want    float64
	}{
		{"square at knot", square, 3, 9},
		{"square 0.5", square, 0.5, 5.0 / 16},
		{"square 2.5", square, 2.5, 599.0 / 96},
		{"square 3.5", square, 3.5, 587.0 / 48},
		{"counts 500", nonlin, 500, 213.0 / 1600},
		{"counts 1500", nonlin, 1500, 79707.0 / 157600},
		{"counts 3000", nonlin, 3000, 124637.0 / 94560},
		{"counts 3000 reversed rows", nonlinRev, 3000, 124637.0 / 94560},
		// Out of range: the straight line through the end points. Below 0
		// counts the slope is 0.3/1000 m per count; above 4000 it is
		// 1.25/2000 (computed).
		{"counts below the table", nonlin, -100, -0.03},
		{"counts above the table", nonlin, 4200, 2.125},
		{"falling mid", falling, 1.5, 1.5},
		{"falling above the table", falling, 3.0, 0.0},
		{"line 5.5", line, 5.5, 1.0},
		{"line 1.5", line, 1.5, 0.2},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			got := tc.c.ValueSI(tc.reading)
			if math.Abs(got-tc.want) > 1e-12 {
				t.Errorf("ValueSI(%v) = %.15g, want %.15g", tc.reading, got, tc.want)
			}
			back := tc.c.Reading(got)
			if math.Abs(back-tc.reading) > 1e-9*math.Max(1, math.Abs(tc.reading)) {
				t.Errorf("Reading(ValueSI(%v)) = %.15g", tc.reading, back)
			}
		})
	}
	if lo, hi := nonlin.ReadingRange(); lo != 0 || hi != 4000 {
		t.Errorf("ReadingRange = %v, %v; want 0, 4000", lo, hi)
	}
	if _, _, ok := nonlin.Linear(); ok {
		t.Error("a 4-point table reports itself linear")
	}
	if g, o, ok := mustTable(t, []float64{4, 20}, []float64{0, 3.2}).Linear(); !ok || math.Abs(g-0.2) > 1e-15 || math.Abs(o+0.8) > 1e-15 {
		t.Errorf("two points: Linear() = %v, %v, %v; want 0.2, -0.8, true", g, o, ok)
	}
	// Monotone between the points: no overshoot on a fine grid, for a
	// table with a sharp bend (invented data) where an unconstrained cubic
	// spline would overshoot.
	bend := mustTable(t, []float64{0, 1, 2, 3, 4, 5}, []float64{0, 0.01, 0.02, 1.5, 1.51, 1.52})
	for _, c := range []*Calibration{square, nonlin, falling, bend} {
		lo, hi := c.ReadingRange()
		prev := c.ValueSI(lo)
		up := c.ValueSI(hi) > prev
		for k := 1; k <= 5000; k++ {
			r := lo + (hi-lo)*float64(k)/5000
			v := c.ValueSI(r)
			if (v < prev) == up && v != prev {
				t.Fatalf("not monotone at reading %v: %v after %v", r, v, prev)
			}
			prev = v
		}
	}
}

func TestCalibrationErrors(t *testing.T) {
	tests := []struct {
		name string
		r, v []float64
		want string
	}{
		{"one point", []float64{4}, []float64{0}, "need at least 2"},
		{"lengths differ", []float64{4, 20}, []float64{0}, "2 readings but 1 values"},
		{"repeated reading", []float64{4, 8, 8, 20}, []float64{0, 1, 2, 3}, "point 2: the readings are not strictly monotone"},
		{"reading turns back", []float64{4, 8, 6}, []float64{0, 1, 2}, "point 2: the readings are not strictly monotone"},
		{"flat value", []float64{4, 8, 12}, []float64{0, 1, 1}, "point 2: the values are not strictly monotone"},
		{"value turns back", []float64{4, 8, 12}, []float64{0, 1, 0.5}, "point 2: the values are not strictly monotone"},
		{"NaN", []float64{4, math.NaN()}, []float64{0, 1}, "not finite"},
	}
	for _, tc := range tests {
		_, err := NewTableCalibration(tc.r, tc.v)
		if err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%s: error = %v, want it to contain %q", tc.name, err, tc.want)
		}
	}
	for _, g := range []float64{0, math.NaN(), math.Inf(1)} {
		if _, err := NewLinearCalibration(g, 0); err == nil {
			t.Errorf("NewLinearCalibration(%v, 0): want an error", g)
		}
	}
	c := mustLinear(t, 0.2, -0.8)
	for i, s := range []Sensor{
		{Kind: Depth, Calibration: c, UnitToSI: 1},
		{Kind: Depth, Calibration: c, SpanM: 3},
		{Kind: Depth, Calibration: c, ZeroOffset: 4},
		{Kind: Pressure, Calibration: c, DensityKgM3: -1},
		{Kind: 9, Calibration: c},
	} {
		if err := s.Validate(); err == nil {
			t.Errorf("case %d: Validate(%+v) = nil, want an error", i, s)
		}
	}
}
