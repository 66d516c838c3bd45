package config

import (
	"errors"
	"fmt"
	"math"
	"sort"
	"strconv"
	"strings"
	"time"
)

// Conversion factors to SI. Sources: NIST Special Publication 811 (2008),
// Guide for the Use of the International System of Units, Appendix B.8
// (factors in alphabetical order) and B.9 (by kind of quantity). "Exact"
// marks factors that are exact by definition.
const (
	FootM        = 0.3048   // 1 ft = 0.3048 m, exact (NIST SP 811 B.8)
	InchM        = 0.0254   // 1 in = 0.0254 m, exact (NIST SP 811 B.8)
	PsiPa        = 6894.757 // 1 lbf/in^2 = 6.894 757 E+03 Pa (NIST SP 811 B.8)
	BarPa        = 1e5      // 1 bar = 1e5 Pa, exact (NIST SP 811 B.8)
	MetreWaterPa = 9806.65  // conventional metre of water = 1000 kg/m^3 · g_n, exact by that convention (NIST SP 811 B.8 lists the conventional cmH2O as 98.0665 Pa)
	LitreM3      = 1e-3     // 1 L = 1e-3 m^3, exact (NIST SP 811 B.8)
	JulianYearS  = 31557600 // 1 a = 365.25 d, the Julian year (IAU); "y" in durations
	StandardG    = 9.80665  // g_n, m/s^2, exact (3rd CGPM 1901)
	WaterDensity = 998.2067 // kg/m^3, air-free water at 20 °C, Tanaka et al. (2001), Metrologia 38:301
)

// Volume factors for strapping tables, to m^3. NIST SP 811 (2008) Appendix
// B.8 gives them rounded to 7 digits; the exact values are by definition.
const (
	CubicCentimetreM3 = 1e-6           // 1 cm^3 = 1e-6 m^3, exact (SI prefix)
	USGallonM3        = 3.785411784e-3 // 1 US gal = 231 in^3 = 3.785411784 L, exact (NIST SP 811 B.8 lists 3.785 412 E-03 m^3)
	ImperialGallonM3  = 4.54609e-3     // 1 imp gal = 4.54609 L, exact by the UK Weights and Measures Act 1985 (NIST SP 811 B.8: 4.546 09 E-03 m^3)
	CubicFootM3       = 0.028316846592 // 1 ft^3 = 0.3048^3 m^3, exact (NIST SP 811 B.8 lists 2.831 685 E-02 m^3)
	BarrelM3          = 0.158987294928 // 1 bbl (petroleum) = 42 US gal, exact (NIST SP 811 B.8 lists 1.589 873 E-01 m^3)
)

// Unit tables: the accepted spellings and their factor to SI.
var (
	lengthUnits = map[string]float64{
		"m": 1, "cm": 1e-2, "mm": 1e-3, "km": 1e3, "ft": FootM, "in": InchM,
	}
	pressureUnits = map[string]float64{
		"Pa": 1, "hPa": 100, "kPa": 1e3, "MPa": 1e6, "mbar": 100, "bar": BarPa, "psi": PsiPa,
		"mH2O": MetreWaterPa, "cmH2O": MetreWaterPa / 100, "mmH2O": MetreWaterPa / 1000,
	}
	densityUnits = map[string]float64{
		"kg/m3": 1, "kg/m^3": 1, "kg/m³": 1, "g/cm3": 1000, "g/cm^3": 1000, "g/cm³": 1000,
		"g/mL": 1000, "g/ml": 1000, "kg/L": 1000, "kg/l": 1000, "g/L": 1, "g/l": 1,
	}
	flowUnits = map[string]float64{
		"m3/s": 1, "m^3/s": 1, "m³/s": 1,
		"m3/min": 1.0 / 60, "m^3/min": 1.0 / 60, "m³/min": 1.0 / 60,
		"m3/h": 1.0 / 3600, "m^3/h": 1.0 / 3600, "m³/h": 1.0 / 3600,
		"L/s": LitreM3, "l/s": LitreM3, "L/min": LitreM3 / 60, "l/min": LitreM3 / 60,
		"L/h": LitreM3 / 3600, "l/h": LitreM3 / 3600,
	}
	// Spellings with a space also take "_" for CSV headers (volume_US_gal).
	volumeUnits = map[string]float64{
		"m3": 1, "m^3": 1, "m³": 1, "L": LitreM3, "l": LitreM3,
		"cm3": CubicCentimetreM3, "cm^3": CubicCentimetreM3, "cm³": CubicCentimetreM3, "mL": CubicCentimetreM3,
		"US gal": USGallonM3, "US_gal": USGallonM3, "imp gal": ImperialGallonM3, "imp_gal": ImperialGallonM3,
		"ft3": CubicFootM3, "ft^3": CubicFootM3, "ft³": CubicFootM3, "bbl": BarrelM3,
	}
	durationUnits = map[string]float64{ // seconds
		"ms": 1e-3, "s": 1, "min": 60, "h": 3600, "d": 86400, "w": 7 * 86400, "y": JulianYearS,
	}
	kUnits = map[string]float64{"m^2.5/s": 1, "m2.5/s": 1}
)

// splitQuantity separates "12.5 kPa" into 12.5 and "kPa". The space is
// optional ("80mm"). The number must be finite.
func splitQuantity(s string) (float64, string, error) {
	s = strings.TrimSpace(s)
	i := 0
	if i < len(s) && (s[i] == '+' || s[i] == '-') {
		i++
	}
	digits := 0
	for ; i < len(s) && (s[i] >= '0' && s[i] <= '9' || s[i] == '.'); i++ {
		if s[i] != '.' {
			digits++
		}
	}
	if digits == 0 {
		return 0, "", fmt.Errorf("%q does not start with a number", s)
	}
	if i < len(s) && (s[i] == 'e' || s[i] == 'E') {
		j := i + 1
		if j < len(s) && (s[j] == '+' || s[j] == '-') {
			j++
		}
		k := j
		for ; k < len(s) && s[k] >= '0' && s[k] <= '9'; k++ {
		}
		if k > j { // an exponent, not the start of a unit
			i = k
		}
	}
	v, err := strconv.ParseFloat(s[:i], 64)
	if err != nil || math.IsInf(v, 0) {
		return 0, "", fmt.Errorf("%q is not a finite number", s[:i])
	}
	return v, strings.TrimSpace(s[i:]), nil
}

// parseWith converts a quantity with the unit table of its kind. A bare 0
// needs no unit.
func parseWith(s, kind, example string, units map[string]float64) (float64, error) {
	v, unit, err := splitQuantity(s)
	if err != nil {
		return 0, fmt.Errorf("want a %s such as %q: %w", kind, example, err)
	}
	if unit == "" {
		if v == 0 {
			return 0, nil
		}
		return 0, fmt.Errorf("want a %s such as %q: %q has no unit (one of %s)", kind, example, s, unitList(units))
	}
	f, ok := units[unit]
	if !ok {
		return 0, fmt.Errorf("unknown %s unit %q (want one of %s)", kind, unit, unitList(units))
	}
	if si := v * f; !math.IsInf(si, 0) {
		return si, nil
	}
	return 0, fmt.Errorf("%s %q is out of range", kind, s)
}

func unitList(units map[string]float64) string {
	names := make([]string, 0, len(units))
	for u := range units {
		names = append(names, u)
	}
	sort.Strings(names)
	return strings.Join(names, ", ")
}

// ParseLength reads a length ("80 mm", "3.2 m", "10 ft") and returns metres.
// Units: m, cm, mm, km, ft, in.
func ParseLength(s string) (float64, error) { return parseWith(s, "length", "80 mm", lengthUnits) }

// ParsePressure reads a pressure ("12.5 kPa") and returns pascals. Units: Pa,
// hPa, kPa, MPa, mbar, bar, psi, and the conventional water columns mH2O,
// cmH2O, mmH2O (1 mH2O = 9806.65 Pa).
func ParsePressure(s string) (float64, error) {
	return parseWith(s, "pressure", "12.5 kPa", pressureUnits)
}

// ParseDensity reads a density ("998.2 kg/m3") and returns kg/m^3. Units:
// kg/m3 (also kg/m^3, kg/m³), g/cm3, g/mL, kg/L, g/L.
func ParseDensity(s string) (float64, error) {
	return parseWith(s, "density", "998.2 kg/m3", densityUnits)
}

// ParseFlow reads a volume flow ("2.5 L/s") and returns m^3/s. Units: m3/s,
// m3/min, m3/h, L/s, L/min, L/h (also with ^3 or ³, and a lower-case l).
func ParseFlow(s string) (float64, error) { return parseWith(s, "flow", "2.5 L/s", flowUnits) }

// ParseVolume reads a volume ("1.2 m3", "850 L", "300 US gal") and returns
// m^3. Units: m3 (also m^3, m³), L (l), cm3 (cm^3, cm³, mL), US gal, imp gal
// (or US_gal, imp_gal), ft3 (ft^3, ft³) and bbl (the 42 US gal oil barrel);
// a bare "gal" is refused as ambiguous.
func ParseVolume(s string) (float64, error) {
	if _, unit, err := splitQuantity(s); err == nil && isBareGallon(unit) {
		return 0, fmt.Errorf("volume %q: %q is ambiguous: write US gal or imp gal", s, unit)
	}
	return parseWith(s, "volume", "1.2 m3", volumeUnits)
}

func isBareGallon(unit string) bool {
	switch unit {
	case "gal", "gallon", "gallons", "Gal":
		return true
	}
	return false
}

// ParseOutletConstant reads K in m^2.5/s; the unit may be left out.
func ParseOutletConstant(s string) (float64, error) {
	v, unit, err := splitQuantity(s)
	if err != nil {
		return 0, fmt.Errorf("want an outlet constant such as \"0.0021 m^2.5/s\": %w", err)
	}
	if unit == "" {
		return v, nil
	}
	return parseWith(s, "outlet constant", "0.0021 m^2.5/s", kUnits)
}

// ParseDuration reads a duration ("5 min", "2 h", "5 y") with the units ms,
// s, min, h, d (86400 s), w (7 d) and y (the Julian year, 365.25 d). Unlike
// time.ParseDuration it takes one number and one unit, and "m" is refused as
// ambiguous (metre or minute).
func ParseDuration(s string) (time.Duration, error) {
	_, unit, err := splitQuantity(s)
	if err == nil && unit == "m" {
		err = errors.New(`"m" is ambiguous: write min for minutes`)
	}
	if err != nil {
		return 0, fmt.Errorf("want a duration such as \"5 min\": %w", err)
	}
	sec, err := parseWith(s, "duration", "5 min", durationUnits)
	if err != nil {
		return 0, err
	}
	ns := math.Round(sec * 1e9)
	if ns >= math.MaxInt64 || ns <= math.MinInt64 {
		return 0, fmt.Errorf("duration %q is longer than 292 years", s)
	}
	return time.Duration(ns), nil
}
