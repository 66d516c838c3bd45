package config

import (
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// rawTank is a one-tank file whose sensor block starts at line 6; the
// calibration's own lines start at line 10.
func rawTank(kind, unit, calibration string) string {
	return "tanks:\n  - id: A\n    geometry: {shape: sphere, diameter: 4 m}\n    outlet: {elevation: 0 m}\n" +
		"    source: {format: csv, paths: [a.csv]}\n    sensor:\n      kind: " + kind + "\n      unit: " + unit +
		"\n      calibration:\n" + calibration
}

func TestRawSensorCalibration(t *testing.T) {
	dir := t.TempDir()
	files := map[string]string{
		"loop.csv":   "# KV-SHT-2 transmitter, invented\nreading_mA,level_mm\n4,0\n12,1600\n20,3200\n",
		"counts.csv": "reading,level_m\n0,0\n1000,0.30\n2000,0.75\n4000,2.0\n",
		"kpa.csv":    "reading_mA,pressure_kPa\n4,0\n20,50\n",
	}
	for name, body := range files {
		if err := os.WriteFile(filepath.Join(dir, name), []byte(body), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	tests := []struct {
		name       string
		kind, unit string
		cal        string
		gain, off  float64
		points     []CalibrationPoint
		file       string
	}{
		// 4-20 mA is the signal range of IEC 60381-1; 4 mA = 0 m, 20 mA = 3.2 m (invented span).
		{"two points", "depth", "mA", "        points: [[4 mA, 0 m], [20 mA, 3.2 m]]\n", 0, 0,
			[]CalibrationPoint{{4, 0}, {20, 3.2}}, ""},
		{"bare readings", "depth", "mA", "        points: [[4, 0 m], [20, 320 cm]]\n", 0, 0,
			[]CalibrationPoint{{4, 0}, {20, 3.2}}, ""},
		// The same line as gain and offset: 3.2 m / 16 mA = 0.2 m/mA, -0.8 m at 0 mA (computed).
		{"gain per unit and offset", "depth", "mA", "        gain: 0.2 m/mA\n        offset: -0.8 m\n", 0.2, -0.8, nil, ""},
		{"gain without per", "depth", "V", "        gain: 320 mm\n", 0.32, 0, nil, ""},
		{"negative gain", "depth", "counts", "        gain: -0.5 mm\n        offset: 3 m\n", -0.0005, 3, nil, ""},
		// 50 kPa over 16 mA = 3125 Pa/mA (computed).
		{"pressure gain", "pressure", "mA", "        gain: 3.125 kPa/mA\n        offset: -12.5 kPa\n", 3125, -12500, nil, ""},
		{"pressure points", "pressure", "mA", "        points: [[4 mA, 0 kPa], [20 mA, 0.5 bar]]\n", 0, 0,
			[]CalibrationPoint{{4, 0}, {20, 50000}}, ""},
		{"table falling readings", "depth", "m_to_surface", "        points: [[0.2, 2.8 m], [1.0, 2.0 m], [2.0, 1.0 m], [2.8, 0.2 m]]\n", 0, 0,
			[]CalibrationPoint{{0.2, 2.8}, {1, 2}, {2, 1}, {2.8, 0.2}}, ""},
		{"file in mm", "depth", "mA", "        file: loop.csv\n", 0, 0,
			[]CalibrationPoint{{4, 0}, {12, 1.6}, {20, 3.2}}, "loop.csv"},
		{"file in counts", "depth", "counts", "        file: counts.csv\n", 0, 0,
			[]CalibrationPoint{{0, 0}, {1000, 0.3}, {2000, 0.75}, {4000, 2}}, "counts.csv"},
		{"pressure file", "pressure", "mA", "        file: kpa.csv\n", 0, 0,
			[]CalibrationPoint{{4, 0}, {20, 50000}}, "kpa.csv"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			c, err := Parse([]byte(rawTank(tc.kind, tc.unit, tc.cal)), filepath.Join(dir, "plant.yaml"))
			if err != nil {
				t.Fatal(err)
			}
			s := c.Tanks[0].Sensor
			if s.Unit != tc.unit || s.UnitToSI != 0 || s.SpanM != 0 || s.ZeroOffset != 0 || s.Calibration == nil {
				t.Fatalf("sensor = %+v", s)
			}
			cal := s.Calibration
			if math.Abs(cal.GainSI-tc.gain) > 1e-12 || math.Abs(cal.OffsetSI-tc.off) > 1e-12 {
				t.Errorf("gain, offset = %.15g, %.15g; want %g, %g", cal.GainSI, cal.OffsetSI, tc.gain, tc.off)
			}
			if len(cal.Points) != len(tc.points) {
				t.Fatalf("points = %v, want %v", cal.Points, tc.points)
			}
			for i, p := range cal.Points {
				if math.Abs(p.Reading-tc.points[i].Reading) > 1e-12 || math.Abs(p.ValueSI-tc.points[i].ValueSI) > 1e-9 {
					t.Errorf("point %d = %v, want %v", i, p, tc.points[i])
				}
			}
			if want := ""; tc.file != "" {
				want = filepath.Join(dir, tc.file)
				if cal.File != want {
					t.Errorf("file = %q, want %q", cal.File, want)
				}
			}
			r, v := cal.Table()
			if len(r) != len(cal.Points) || len(v) != len(cal.Points) {
				t.Errorf("Table() lengths %d, %d", len(r), len(v))
			}
		})
	}
}

func TestRawSensorErrors(t *testing.T) {
	dir := t.TempDir()
	files := map[string]string{
		"down.csv":  "reading_mA,level_m\n4,0\n8,1\n12,0.9\n20,3.2\n",
		"flat.csv":  "reading_mA,level_m\n4,0\n8,1\n8,1.5\n",
		"head.csv":  "reading_V,level_m\n4,0\n",
		"short.csv": "reading,level_m\n4,0\n",
		"bad.csv":   "reading,level_m\n4,0\n8,x\n20,3.2\n",
	}
	for name, body := range files {
		if err := os.WriteFile(filepath.Join(dir, name), []byte(body), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	p := "plant.yaml:"
	tests := []struct {
		name       string
		kind, unit string
		cal        string
		want       []string
	}{
		{"points not monotone", "depth", "mA", "        points:\n          - [4 mA, 0 m]\n          - [12 mA, 1.6 m]\n          - [10 mA, 2 m]\n", []string{
			p + "13: tanks[0].sensor.calibration.points[2]: readings must be strictly monotone: 10 after 12 breaks the increasing order set by the first two points"}},
		{"levels not monotone", "depth", "mA", "        points:\n          - [4 mA, 0 m]\n          - [12 mA, 1.6 m]\n          - [20 mA, 1.6 m]\n", []string{
			p + "13: tanks[0].sensor.calibration.points[2]: levels must be strictly monotone: 1.6 m after 1.6 m breaks the increasing order"}},
		{"pressure not monotone", "pressure", "mA", "        points: [[4, 0 kPa], [12, 30 kPa], [20, 20 kPa]]\n", []string{
			p + "10: tanks[0].sensor.calibration.points[2]: pressures must be strictly monotone: 20000 Pa after 30000 Pa breaks the increasing order"}},
		{"file not monotone", "depth", "mA", "        file: down.csv\n", []string{
			p + "10: tanks[0].sensor.calibration.file: down.csv:4: levels must be strictly monotone: 0.9 m after 1 m breaks the increasing order"}},
		{"file repeated reading", "depth", "mA", "        file: flat.csv\n", []string{
			p + "10: tanks[0].sensor.calibration.file: flat.csv:4: readings must be strictly monotone: 8 after 8"}},
		{"file header", "depth", "mA", "        file: head.csv\n", []string{
			p + `10: tanks[0].sensor.calibration.file: head.csv:1: header "reading_V,level_m": header must be reading or reading_mA,level_<unit>; level units: cm, ft, in, km, m, mm`}},
		{"pressure file wants pressure", "pressure", "mA", "        file: short.csv\n", []string{
			`short.csv:1: header "reading,level_m": header must be reading or reading_mA,pressure_<unit>; pressure units: MPa, Pa, bar`}},
		{"file too short", "depth", "mA", "        file: short.csv\n", []string{
			p + "10: tanks[0].sensor.calibration.file: a calibration table needs at least 2 points"}},
		{"file bad row", "depth", "mA", "        file: bad.csv\n", []string{
			p + "10: tanks[0].sensor.calibration.file: bad.csv:3: want two plain numbers (reading, level)"}},
		{"file missing", "depth", "mA", "        file: none.csv\n", []string{
			p + "10: tanks[0].sensor.calibration.file: cannot read the calibration table: no such file or directory"}},
		{"one point", "depth", "mA", "        points: [[4 mA, 0 m]]\n", []string{
			p + "10: tanks[0].sensor.calibration.points: a calibration table needs at least 2 points"}},
		{"reading in another unit", "depth", "mA", "        points: [[4 V, 0 m], [20 mA, 3.2 m]]\n", []string{
			p + `10: tanks[0].sensor.calibration.points[0]: reading: "4 V" is not in the sensor's unit "mA"`}},
		{"level without unit", "depth", "mA", "        points: [[4 mA, 0 m], [20 mA, 3.2]]\n", []string{
			p + `10: tanks[0].sensor.calibration.points[1]: level: want a length such as "80 mm": "3.2" has no unit`}},
		{"pressure point in metres", "pressure", "mA", "        points: [[4, 0 kPa], [20, 3.2 m]]\n", []string{
			p + `10: tanks[0].sensor.calibration.points[1]: pressure: unknown pressure unit "m"`}},
		{"not a pair", "depth", "mA", "        points: [[4 mA, 0 m], [20 mA]]\n", []string{
			p + "10: tanks[0].sensor.calibration.points[1]: want a pair [reading, level] such as [4 mA, 0 m]"}},
		{"gain per other unit", "depth", "mA", "        gain: 0.2 m/V\n", []string{
			p + `10: tanks[0].sensor.calibration.gain: gain "0.2 m/V" is per "V", but the sensor's unit is "mA"`}},
		{"gain zero", "depth", "mA", "        gain: 0 m\n", []string{
			p + "10: tanks[0].sensor.calibration.gain: must not be 0"}},
		{"gain without unit", "depth", "mA", "        gain: 0.2\n", []string{
			p + `10: tanks[0].sensor.calibration.gain: want a length such as "80 mm": "0.2" has no unit`}},
		{"offset alone", "depth", "mA", "        offset: 1 m\n", []string{
			p + "10: tanks[0].sensor.calibration.offset: applies with gain only",
			p + "10: tanks[0].sensor.calibration: give gain (and offset), points or file"}},
		{"two forms", "depth", "mA", "        gain: 0.2 m\n        points: [[4, 0 m], [20, 3.2 m]]\n", []string{
			p + "11: tanks[0].sensor.calibration.points: give one of gain (with offset), points or file, not gain and points"}},
		{"unknown key", "depth", "mA", "        gain: 0.2 m\n        slope: 1\n", []string{
			p + "11: tanks[0].sensor.calibration.slope: unknown key"}},
		{"bad label", "depth", "mA/s", "        gain: 0.2 m\n", []string{
			p + `8: tanks[0].sensor.unit: "mA/s": with a calibration, name the raw reading`}},
		{"zero offset refused", "depth", "mA", "        gain: 0.2 m\n      zero_offset: 4\n", []string{
			p + "11: tanks[0].sensor.zero_offset: does not apply with a calibration"}},
		{"span refused", "depth", "percent", "        gain: 0.032 m\n      span: 3.2 m\n", []string{
			p + "11: tanks[0].sensor.span: does not apply with a calibration"}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, err := Parse([]byte(rawTank(tc.kind, tc.unit, tc.cal)), filepath.Join(dir, "plant.yaml"))
			if err == nil {
				t.Fatal("no error")
			}
			got := strings.ReplaceAll(err.Error(), dir+string(filepath.Separator), "")
			for _, w := range tc.want {
				if !strings.Contains(got, w) {
					t.Errorf("error:\n%s\nwant it to contain\n%s", got, w)
				}
			}
			if n, want := strings.Count(got, "\n"), len(tc.want); n != want {
				t.Errorf("%d problems, want %d:\n%s", n, want, got)
			}
		})
	}
}

// The percent-of-span sensor is unchanged by the calibration keys.
func TestPercentSensorUnchanged(t *testing.T) {
	doc := strings.Replace(rawTank("depth", "percent", ""), "      calibration:\n", "      span: 3.2 m\n", 1)
	c, err := Parse([]byte(doc), "plant.yaml")
	if err != nil {
		t.Fatal(err)
	}
	if s := c.Tanks[0].Sensor; s.Unit != "percent" || s.SpanM != 3.2 || s.Calibration != nil || s.UnitToSI != 0 {
		t.Errorf("sensor = %+v", s)
	}
}

func TestStrappingVolumeUnits(t *testing.T) {
	dir := t.TempDir()
	files := map[string]string{
		"gal.csv":  "level_in,volume_US_gal\n0,0\n12,150\n24,310\n",
		"imp.csv":  "level_m,volume_imp gal\n0,0\n1,500\n",
		"bbl.csv":  "level_ft,volume_bbl\n0,0\n10,40\n",
		"cm3.csv":  "level_cm,volume_cm3\n0,0\n50,90000\n",
		"ft3.csv":  "level_ft,volume_ft3\n0,0\n4,100\n",
		"bad.csv":  "level_m,volume_gal\n0,0\n1,2\n",
		"bad2.csv": "height_m,volume_m3\n0,0\n1,2\n",
	}
	for name, body := range files {
		if err := os.WriteFile(filepath.Join(dir, name), []byte(body), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	doc := func(geo string) string {
		return "tanks:\n  - id: A\n    geometry: " + geo + "\n    outlet: {elevation: 0 m}\n    sensor: {kind: depth, unit: m}\n    source: {format: csv, paths: [a.csv]}\n"
	}
	tests := []struct {
		name   string
		geo    string
		levelM float64 // of the last point
		volM3  float64
	}{
		// 24 in = 0.6096 m; 310 US gal · 3.785411784e-3 = 1.17347765304 m^3 (NIST SP 811 B.8; computed).
		{"US gal file", "{shape: strapping_table, file: gal.csv}", 0.6096, 1.17347765304},
		// 500 imp gal · 4.54609e-3 = 2.273045 m^3 (Weights and Measures Act 1985; computed).
		{"imp gal file", "{shape: strapping_table, file: imp.csv}", 1, 2.273045},
		// 40 bbl · 0.158987294928 = 6.35949179712 m^3 (42 US gal each; computed).
		{"bbl file", "{shape: strapping_table, file: bbl.csv}", 3.048, 6.35949179712},
		{"cm3 file", "{shape: strapping_table, file: cm3.csv}", 0.5, 0.09},
		// 100 ft^3 · 0.028316846592 = 2.8316846592 m^3 (computed).
		{"ft3 file", "{shape: strapping_table, file: ft3.csv}", 1.2192, 2.8316846592},
		{"US gal points", "{shape: strapping_table, points: [[0 m, 0 m3], [0.6096 m, 310 US gal]]}", 0.6096, 1.17347765304},
		{"imp gal points", "{shape: strapping_table, points: [[0 m, 0 L], [1 m, 500 imp gal]]}", 1, 2.273045},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			c, err := Parse([]byte(doc(tc.geo)), filepath.Join(dir, "plant.yaml"))
			if err != nil {
				t.Fatal(err)
			}
			st := c.Tanks[0].Geometry.Strapping
			last := st[len(st)-1]
			if math.Abs(last.LevelM-tc.levelM) > 1e-12 || math.Abs(last.VolumeM3-tc.volM3) > 1e-12 {
				t.Errorf("last point = %+v, want {%g %g}", last, tc.levelM, tc.volM3)
			}
		})
	}
	for _, tc := range []struct{ geo, want string }{
		{"{shape: strapping_table, file: bad.csv}", `bad.csv:1: header "level_m,volume_gal": header must be level_<unit>,volume_<unit>; level units: cm, ft, in, km, m, mm; volume units: L, US gal, US_gal, bbl, cm3`},
		{"{shape: strapping_table, file: bad2.csv}", `tanks[0].geometry.file: bad2.csv:1: header "height_m,volume_m3": header must be level_<unit>,volume_<unit>`},
		{"{shape: strapping_table, points: [[0 m, 0 m3], [1 m, 2 gal]]}", `tanks[0].geometry.points[1]: volume: volume "2 gal": "gal" is ambiguous: write US gal or imp gal`},
		{"{shape: strapping_table, points: [[0 m, 0 m3], [1 m, 2 barrels]]}", `unknown volume unit "barrels" (want one of L, US gal, US_gal, bbl, cm3`},
	} {
		_, err := Parse([]byte(doc(tc.geo)), filepath.Join(dir, "plant.yaml"))
		if err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%s: error = %v\nwant it to contain %q", tc.geo, err, tc.want)
		}
	}
}
