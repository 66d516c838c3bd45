package config

import (
	"errors"
	"math"
	"os"
	"strings"
	"testing"
)

// FuzzParse: no input panics Parse, and every failure is either a YAML
// syntax error or a ValidationError whose problems all carry a path and a
// message.
func FuzzParse(f *testing.F) {
	for _, name := range []string{"testdata/example.yaml", "testdata/broken.yaml"} {
		b, err := os.ReadFile(name)
		if err != nil {
			f.Fatal(err)
		}
		f.Add(b)
	}
	f.Add([]byte("tanks: [{id: a, geometry: {<<: [*x]}}]"))
	f.Add([]byte("a: &a [*a]\ntanks: *a\n"))
	f.Add([]byte("outputs: {scan_schedule: 'CRON_TZ=UTC', report: {schedule: 'TZ='}}\n"))
	f.Add([]byte("defaults: &d {defaults: *d}\n"))
	f.Add([]byte("tanks: [{id: a, geometry: {shape: sphere, diameter: 2 m}, outlet: {elevation: 0}, source: {format: csv, paths: [a]}, " +
		"sensor: {kind: depth, unit: mA, calibration: {points: [[4 mA, 0 m], [12, 1 m], [20 mA, 3 m]]}}}]\n"))
	f.Add([]byte("tanks: [{id: a, sensor: {kind: pressure, unit: V, calibration: {gain: 2 kPa/V, offset: -1 kPa, file: x.csv}}}]\n"))
	f.Fuzz(func(t *testing.T, data []byte) {
		c, err := Parse(data, "fuzz/plant.yaml")
		if err == nil {
			if c == nil || len(c.Tanks) == 0 {
				t.Fatalf("no error but config %+v", c)
			}
			return
		}
		var ve *ValidationError
		if !errors.As(err, &ve) {
			if !strings.Contains(err.Error(), "yaml") {
				t.Fatalf("error is neither yaml nor validation: %v", err)
			}
			return
		}
		if len(ve.Problems) == 0 {
			t.Fatal("ValidationError without problems")
		}
		for _, p := range ve.Problems {
			if p.Msg == "" {
				t.Fatalf("problem without a message: %+v", p)
			}
		}
	})
}

// FuzzParseQuantity: the unit parsers never panic and return finite values
// or an error.
func FuzzParseQuantity(f *testing.F) {
	for _, s := range []string{"80 mm", "3.2 m", "12.5 kPa", "998.2 kg/m3", "5 min", "5 y", "1e308 km", "-0", ".5 in", "1e", "2 L/s", "0x1p3 m"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		for _, p := range []func(string) (float64, error){ParseLength, ParsePressure, ParseDensity, ParseFlow, ParseVolume, ParseOutletConstant} {
			v, err := p(s)
			if err == nil && (math.IsNaN(v) || math.IsInf(v, 0)) {
				t.Fatalf("%q parsed to %v", s, v)
			}
		}
		if d, err := ParseDuration(s); err == nil && strings.HasPrefix(strings.TrimSpace(s), "-") == (d > 0) && d != 0 {
			t.Fatalf("%q parsed to %v: wrong sign", s, d)
		}
	})
}

// FuzzReadTable: no input panics the table reader; every row it returns is
// finite with a line after the header and in file order, and every problem
// names the file.
func FuzzReadTable(f *testing.F) {
	for _, s := range []string{
		"level_m,volume_m3\n0,0\n1,2\n",
		"\ufeff# survey\nlevel_mm, volume_US_gal\r\n0,0\r\n500,120\r\n",
		"reading_mA,level_m\n4,0\n20,3.2\n",
		"reading,pressure_kPa\n4,0\n\"20\",50\n",
		"level_m,volume_bbl\n1,\"2\n",
		"level_m,volume_L\n1e308,1e308\n-0,0x10\n",
		"level,volume\n",
		"",
	} {
		f.Add([]byte(s))
	}
	cols := [][2]column{
		{{name: "level", units: lengthUnits}, {name: "volume", units: volumeUnits}},
		{{name: "reading", label: "mA"}, {name: "level", units: lengthUnits}},
		{{name: "reading"}, {name: "pressure", units: pressureUnits}},
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		for _, c := range cols {
			rows, probs := readTable(data, "fuzz.csv", c)
			prev := 0
			for _, r := range rows {
				if math.IsNaN(r.a) || math.IsInf(r.a, 0) || math.IsNaN(r.b) || math.IsInf(r.b, 0) {
					t.Fatalf("row %+v is not finite", r)
				}
				if r.line <= prev || r.line < 2 {
					t.Fatalf("row %+v: line not after %d", r, prev)
				}
				prev = r.line
			}
			for _, p := range probs {
				if !strings.HasPrefix(p, "fuzz.csv") {
					t.Fatalf("problem %q does not name the file", p)
				}
			}
		}
	})
}
