package config

import (
	"math"
	"testing"
	"time"
)

func TestParseQuantities(t *testing.T) {
	type parser func(string) (float64, error)
	tests := []struct {
		name string
		f    parser
		in   string
		want float64
		err  bool
	}{
		{"length mm", ParseLength, "80 mm", 0.08, false},
		{"length m", ParseLength, "3.2 m", 3.2, false},
		{"length no space", ParseLength, "80mm", 0.08, false},
		{"length cm", ParseLength, "5 cm", 0.05, false},
		{"length km", ParseLength, "1.5e-3 km", 1.5, false},
		// 1 ft = 0.3048 m exactly (NIST SP 811 B.8).
		{"length ft", ParseLength, "10 ft", 3.048, false},
		// 1 in = 0.0254 m exactly (NIST SP 811 B.8).
		{"length in", ParseLength, "3 in", 0.0762, false},
		{"length negative", ParseLength, "-0.2 m", -0.2, false},
		{"length bare zero", ParseLength, "0", 0, false},
		{"length no unit", ParseLength, "80", 0, true},
		{"length unknown unit", ParseLength, "80 furlong", 0, true},
		{"length pressure unit", ParseLength, "80 kPa", 0, true},
		{"length no number", ParseLength, "mm", 0, true},
		{"length inf", ParseLength, "1e999 m", 0, true},
		{"length nan", ParseLength, "NaN m", 0, true},
		{"length two dots", ParseLength, "1.2.3 m", 0, true},
		{"pressure Pa", ParsePressure, "250 Pa", 250, false},
		{"pressure kPa", ParsePressure, "12.5 kPa", 12500, false},
		{"pressure hPa", ParsePressure, "3 hPa", 300, false},
		{"pressure MPa", ParsePressure, "0.1 MPa", 1e5, false},
		// 1 bar = 1e5 Pa exactly (NIST SP 811 B.8).
		{"pressure bar", ParsePressure, "0.25 bar", 25000, false},
		{"pressure mbar", ParsePressure, "12 mbar", 1200, false},
		// 1 psi = 6894.757 Pa (NIST SP 811 B.8, 7 significant digits).
		{"pressure psi", ParsePressure, "2 psi", 13789.514, false},
		// Conventional metre of water = 9806.65 Pa (1000 kg/m^3 · g_n).
		{"pressure mH2O", ParsePressure, "1.5 mH2O", 14709.975, false},
		{"pressure cmH2O", ParsePressure, "10 cmH2O", 980.665, false},
		{"pressure mmH2O", ParsePressure, "1000 mmH2O", 9806.65, false},
		{"pressure lower-case pa", ParsePressure, "3 pa", 0, true},
		{"density kg/m3", ParseDensity, "998.2 kg/m3", 998.2, false},
		{"density kg/m^3", ParseDensity, "1000 kg/m^3", 1000, false},
		{"density g/cm3", ParseDensity, "1.05 g/cm3", 1050, false},
		{"density kg/L", ParseDensity, "0.8 kg/L", 800, false},
		{"density no unit", ParseDensity, "998", 0, true},
		{"flow m3/s", ParseFlow, "0.002 m3/s", 0.002, false},
		// 1 L = 1e-3 m^3 exactly (NIST SP 811 B.8).
		{"flow L/s", ParseFlow, "2.5 L/s", 0.0025, false},
		{"flow m3/h", ParseFlow, "36 m3/h", 0.01, false},
		{"flow L/min", ParseFlow, "60 L/min", 0.001, false},
		{"flow unknown", ParseFlow, "1 gpm", 0, true},
		{"volume L", ParseVolume, "850 L", 0.85, false},
		{"volume m3", ParseVolume, "1.2 m3", 1.2, false},
		// 1 cm^3 = 1e-6 m^3 exactly (SI prefix); 1 mL = 1 cm^3 exactly.
		{"volume cm3", ParseVolume, "2500 cm3", 0.0025, false},
		{"volume mL", ParseVolume, "2500 mL", 0.0025, false},
		// 1 US gal = 231 in^3 = 3.785411784 L exactly (NIST SP 811 B.8); 300 US gal = 1.1356235352 m^3 (computed).
		{"volume US gal", ParseVolume, "300 US gal", 1.1356235352, false},
		{"volume US_gal", ParseVolume, "300 US_gal", 1.1356235352, false},
		// 1 imp gal = 4.54609 L exactly (UK Weights and Measures Act 1985); 300 imp gal = 1.363827 m^3 (computed).
		{"volume imp gal", ParseVolume, "300 imp gal", 1.363827, false},
		{"volume imp_gal", ParseVolume, "300 imp_gal", 1.363827, false},
		// 1 ft^3 = 0.3048^3 = 0.028316846592 m^3 exactly (NIST SP 811 B.8); 100 ft^3 = 2.8316846592 m^3 (computed).
		{"volume ft3", ParseVolume, "100 ft3", 2.8316846592, false},
		{"volume ft^3", ParseVolume, "100 ft^3", 2.8316846592, false},
		// 1 bbl (petroleum) = 42 US gal = 0.158987294928 m^3 exactly (NIST SP 811 B.8); 10 bbl = 1.58987294928 m^3 (computed).
		{"volume bbl", ParseVolume, "10 bbl", 1.58987294928, false},
		{"volume bare gal is ambiguous", ParseVolume, "300 gal", 0, true},
		{"volume unknown", ParseVolume, "3 hogshead", 0, true},
		{"K with unit", ParseOutletConstant, "0.0021 m^2.5/s", 0.0021, false},
		{"K bare", ParseOutletConstant, "0.0021", 0.0021, false},
		{"K wrong unit", ParseOutletConstant, "0.0021 L/s", 0, true},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			got, err := tc.f(tc.in)
			if (err != nil) != tc.err {
				t.Fatalf("parse(%q) error = %v, want error %v", tc.in, err, tc.err)
			}
			if math.Abs(got-tc.want) > 1e-12*math.Max(1, math.Abs(tc.want)) {
				t.Errorf("parse(%q) = %.15g, want %.15g", tc.in, got, tc.want)
			}
		})
	}
}

func TestParseDuration(t *testing.T) {
	tests := []struct {
		in   string
		want time.Duration
		err  bool
	}{
		{"5 min", 5 * time.Minute, false},
		{"2 h", 2 * time.Hour, false},
		{"30 s", 30 * time.Second, false},
		{"250 ms", 250 * time.Millisecond, false},
		{"1.5 d", 36 * time.Hour, false},
		{"2 w", 14 * 24 * time.Hour, false},
		// 1 y = 365.25 d, the Julian year (IAU): 31 557 600 s.
		{"1 y", 31557600 * time.Second, false},
		{"5 y", 5 * 31557600 * time.Second, false},
		{"0", 0, false},
		{"5 m", 0, true}, // ambiguous
		{"5", 0, true},
		{"5 fortnights", 0, true},
		{"300 y", 0, true}, // beyond time.Duration
		{"h", 0, true},
	}
	for _, tc := range tests {
		got, err := ParseDuration(tc.in)
		if (err != nil) != tc.err || got != tc.want {
			t.Errorf("ParseDuration(%q) = %v, %v; want %v, error %v", tc.in, got, err, tc.want, tc.err)
		}
	}
}

func TestCheckCron(t *testing.T) {
	tests := []struct {
		spec string
		ok   bool
	}{
		{"0 6 * * 1", true},
		{"*/15 * * * *", true},
		{"@weekly", true},
		{"@every 90s", true},
		{"CRON_TZ=Europe/Berlin 0 6 * * 1", true},
		{"TZ=UTC @daily", true},
		{"CRON_TZ=UTC", false}, // panics inside cron v3.0.1 without the guard
		{"TZ=UTC", false},
		{"CRON_TZ=Nowhere/Atlantis 0 6 * * 1", false},
		{"0 6 * * 7", false}, // day of week is 0-6 in cron v3
		{"0 0 6 * * 1", false},
		{"", false},
		{"@fortnightly", false},
	}
	for _, tc := range tests {
		if err := checkCron(tc.spec); (err == nil) != tc.ok {
			t.Errorf("checkCron(%q) = %v, want ok %v", tc.spec, err, tc.ok)
		}
	}
}

// TestVolumeFactors cross-checks the exact volume factors against their
// definitions: 1 US gal = 231 in^3 and 1 bbl = 42 US gal (NIST SP 811 B.8),
// 1 ft^3 = (0.3048 m)^3 (computed), and against the 7-digit values NIST SP 811
// B.8 prints.
func TestVolumeFactors(t *testing.T) {
	tests := []struct {
		name       string
		got, exact float64
		nist7      float64
	}{
		{"US gal = 231 in^3", USGallonM3, 231 * InchM * InchM * InchM, 3.785412e-3},
		{"imp gal", ImperialGallonM3, 4.54609e-3, 4.54609e-3},
		{"ft^3 = 0.3048^3 m^3", CubicFootM3, FootM * FootM * FootM, 2.831685e-2},
		{"bbl = 42 US gal", BarrelM3, 42 * USGallonM3, 1.589873e-1},
	}
	for _, tc := range tests {
		if math.Abs(tc.got-tc.exact) > 1e-15*tc.exact {
			t.Errorf("%s: %.15g, want %.15g", tc.name, tc.got, tc.exact)
		}
		if math.Abs(tc.got-tc.nist7) > 5e-7*tc.nist7 {
			t.Errorf("%s: %.15g differs from the NIST SP 811 value %g beyond its rounding", tc.name, tc.got, tc.nist7)
		}
	}
}
