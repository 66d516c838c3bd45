package ingest

import (
	"math"
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
