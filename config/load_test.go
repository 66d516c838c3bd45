package config

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"go.yaml.in/yaml/v3"
)

var update = flag.Bool("update", false, "rewrite the golden files under testdata/")

func TestLoadExample(t *testing.T) {
	c, err := Load("testdata/example.yaml")
	if err != nil {
		t.Fatal(err)
	}
	if len(c.Sites) != 1 || len(c.Tanks) != 7 {
		t.Fatalf("%d sites, %d tanks; want 1 and 7", len(c.Sites), len(c.Tanks))
	}
	in := c.Sites[0].Influx
	if in == nil || in.URL != "http://127.0.0.1:8086" || in.Bucket != "tanks/autogen" || in.TokenEnv != "DRAINSIGHT_INFLUX_TOKEN" ||
		in.QueryWindow != 24*time.Hour || in.Overlap != time.Hour || in.FitsMeasurement != "outlet_fit" {
		t.Errorf("influx = %+v", in)
	}
	if d := c.Outputs.Delivery; d.RetryMin != time.Minute || d.RetryMax != time.Hour || d.ExpireAfter != 30*24*time.Hour {
		t.Errorf("outputs.delivery = %+v, want 1 min, 1 h, 30 d", d)
	}
	t1, t2, t3, t4 := c.Tanks[0], c.Tanks[1], c.Tanks[2], c.Tanks[3]
	checks := []struct {
		name      string
		got, want float64
	}{
		{"T1 diameter", t1.Geometry.DiameterM, 1.6},
		{"T1 height", t1.Geometry.HeightM, 2.4},
		{"T1 outlet", t1.Outlet.DiameterM, 0.08},
		{"T1 elevation", t1.Outlet.ElevationM, 0.1},
		{"T1 Cd", t1.Outlet.DesignCd, 0.62},
		{"T1 mm", t1.Sensor.UnitToSI, 1e-3},
		{"T1 zero", t1.Sensor.ZeroOffset, 12},
		{"T1 density (defaults)", t1.Sensor.DensityKgM3, 998.2067},
		{"T1 design K (defaults)", t1.Detection.DesignKM25s, 0.0021},
		{"T2 cone", t2.Geometry.ConeHeightM, 0.6},
		{"T2 outlet 3 in", t2.Outlet.DiameterM, 0.0762},
		{"T2 kPa", t2.Sensor.UnitToSI, 1000},
		{"T2 density overrides defaults", t2.Sensor.DensityKgM3, 1050},
		{"T2 inflow L/s", t2.Sensor.Inflow.ToSI, 1e-3},
		{"T3 span", t3.Sensor.SpanM, 1.5},
		{"T3 height from table", t3.Geometry.HeightM, 1.5},
		{"T3 min drop (own)", t3.Detection.MinDropM, 0.1},
		{"T3 lambda (defaults)", t3.Detection.EWMALambda, 0.2},
		{"T4 height = diameter", t4.Geometry.HeightM, 1.2},
		{"T4 mH2O", t4.Sensor.UnitToSI, 9806.65},
	}
	for _, ck := range checks {
		if math.Abs(ck.got-ck.want) > 1e-12 {
			t.Errorf("%s = %.15g, want %g", ck.name, ck.got, ck.want)
		}
	}
	// Raw transmitter signals (T5-T7) and a strapping file in US gallons (T6).
	t5, t6, t7 := c.Tanks[4], c.Tanks[5], c.Tanks[6]
	if cal := t5.Sensor.Calibration; t5.Sensor.Unit != "mA" || cal == nil || len(cal.Points) != 2 || cal.Points[1] != (CalibrationPoint{20, 3.2}) {
		t.Errorf("T5 sensor = %+v, calibration %+v", t5.Sensor, cal)
	}
	if cal := t6.Sensor.Calibration; cal == nil || math.Abs(cal.GainSI-3125) > 1e-9 || math.Abs(cal.OffsetSI+12500) > 1e-9 || len(cal.Points) != 0 {
		t.Errorf("T6 calibration = %+v, want gain 3125 Pa/mA, offset -12500 Pa", cal)
	}
	// 418 US gal = 418 · 3.785411784e-3 m^3 = 1.582302125712 m^3 (NIST SP 811 B.8; computed).
	if st := t6.Geometry.Strapping; len(st) != 5 || math.Abs(st[4].LevelM-1.5) > 1e-12 || math.Abs(st[4].VolumeM3-1.582302125712) > 1e-12 {
		t.Errorf("T6 strapping = %v", st)
	}
	if cal := t7.Sensor.Calibration; cal == nil || len(cal.Points) != 5 || cal.Points[4] != (CalibrationPoint{3900, 2.05}) ||
		cal.File != filepath.Join("testdata", "tables", "t7-calibration.csv") {
		t.Errorf("T7 calibration = %+v", cal)
	}
	if t2.Outlet.ElevationKnown || !t1.Outlet.ElevationKnown || !t3.Outlet.ElevationKnown {
		t.Errorf("ElevationKnown: T1 %v, T2 %v, T3 %v; want true, false, true", t1.Outlet.ElevationKnown, t2.Outlet.ElevationKnown, t3.Outlet.ElevationKnown)
	}
	if t1.Site != "north-yard" || t1.Source.Format != "line_protocol" || t2.Source.Format != "influx" || len(t2.Source.Paths) != 0 {
		t.Errorf("T1 site %q format %q; T2 format %q paths %v", t1.Site, t1.Source.Format, t2.Source.Format, t2.Source.Paths)
	}
	if want := filepath.Join("testdata", "data", "*.lp"); len(t1.Source.Paths) != 1 || t1.Source.Paths[0] != want {
		t.Errorf("T1 paths = %v, want [%s] (resolved against the config's directory)", t1.Source.Paths, want)
	}
	if len(t3.Geometry.Strapping) != 4 || t3.Geometry.Strapping[2] != (StrappingPoint{1.0, 2.1}) {
		t.Errorf("T3 strapping = %v", t3.Geometry.Strapping)
	}
	if t1.Detection.FalseAlarmInterval != 5*31557600*time.Second || t1.Detection.BaselineDrains != 10 {
		t.Errorf("T1 detection = %+v", t1.Detection)
	}
	o := c.Outputs
	if o.Report.Location == nil || o.Report.Location.String() != "Europe/Berlin" || o.StateFile != filepath.Join("testdata", "out", "state.db") ||
		len(o.Alert.Command) != 3 || !o.Alert.Log || o.Alert.WebhookURLEnv != "DRAINSIGHT_WEBHOOK" {
		t.Errorf("outputs = %+v", o)
	}
}

func TestParseMinimalDefaults(t *testing.T) {
	const doc = `
tanks:
  - id: A
    geometry: {shape: sphere, diameter: 2 m}
    outlet: {elevation: 0}
    sensor: {kind: pressure, unit: psi}
    source: {format: csv, paths: [a.csv]}
`
	c, err := Parse([]byte(doc), "/etc/drainsight/plant.yaml")
	if err != nil {
		t.Fatal(err)
	}
	a := c.Tanks[0]
	if a.Site != "" || a.Sensor.DensityKgM3 != WaterDensity || a.Sensor.UnitToSI != 6894.757 || a.Geometry.HeightM != 2 {
		t.Errorf("tank = %+v", a)
	}
	if a.Source.Paths[0] != "/etc/drainsight/a.csv" || a.Source.Measurement != "tank_level" || a.Source.Precision != "auto" {
		t.Errorf("source = %+v", a.Source)
	}
	d := a.Detection
	if d.BaselineDrains != 8 || d.CusumK != 0.5 || d.EWMALambda != 0.1 || d.MaintenanceFraction != 0.8 ||
		d.MinDropM != 0.05 || d.MinDrainDuration != 2*time.Minute || d.Transient != 30*time.Second ||
		d.Settle != 5*time.Minute || d.GapLimit != 5*time.Minute || d.FalseAlarmInterval != 10*31557600*time.Second {
		t.Errorf("detection defaults = %+v", d)
	}
	o := c.Outputs
	if o.Directory != "/etc/drainsight/out" || o.StateFile != "/etc/drainsight/out/state.db" || o.ScanSchedule != "*/15 * * * *" ||
		o.Report.Schedule != "0 6 * * 1" || o.Report.Location != time.UTC || !o.Alert.Log {
		t.Errorf("outputs defaults = %+v", o)
	}
}

func TestBrokenGolden(t *testing.T) {
	_, err := Load("testdata/broken.yaml")
	var ve *ValidationError
	if !errors.As(err, &ve) {
		t.Fatalf("Load: %v, want a *ValidationError", err)
	}
	got := err.Error() + "\n"
	for _, secret := range []string{"s3cr3t", "hunter2", "secret-path-token"} {
		if strings.Contains(got, secret) {
			t.Errorf("the error repeats the secret %q", secret)
		}
	}
	path := filepath.Join("testdata", "broken.golden")
	if *update {
		if err := os.WriteFile(path, []byte(got), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	want, err := os.ReadFile(path)
	if err != nil {
		t.Fatalf("%v (run go test -update to create it)", err)
	}
	if got != string(want) {
		t.Errorf("validation listing differs from %s:\n--- got\n%s--- want\n%s", path, got, want)
	}
	for i := 1; i < len(ve.Problems); i++ {
		if ve.Problems[i].Line < ve.Problems[i-1].Line {
			t.Errorf("problems not sorted by line at %d", i)
		}
	}
}

func TestParseErrors(t *testing.T) {
	tank := "tanks:\n  - id: A\n    geometry: {shape: sphere, diameter: 2 m}\n    outlet: {elevation: 0 m}\n    sensor: {kind: depth, unit: m}\n    source: {format: csv, paths: [a.csv]}\n"
	tests := []struct {
		name, doc, want string
	}{
		{"empty", "", "x.yaml:1: (document): the file is empty"},
		{"no tanks", "sites: []\n", "x.yaml:1: tanks: at least one tank is required"},
		{"not yaml", "tanks: [\n", "yaml:"},
		{"top-level list", "- a\n", "x.yaml:1: : want a mapping of keys, got a list"},
		{"unknown top key", tank + "colour: red\n", "x.yaml:7: colour: unknown key"},
		{"level without height", tank + "levels:\n  - id: B\n    sensor: {kind: depth, unit: m}\n    source: {format: csv, paths: [b.csv]}\n",
			"x.yaml:8: levels[0].height: required: the basin's depth"},
		{"level with inflow", tank + "levels:\n  - id: B\n    height: 2 m\n    sensor: {kind: depth, unit: m, inflow: {unit: m3/h}}\n    source: {format: csv, paths: [b.csv]}\n",
			"levels[0].sensor.inflow: a level read for the outlets that discharge into it has no inflow meter"},
		{"level named as a tank", tank + "levels:\n  - id: A\n    height: 2 m\n    sensor: {kind: depth, unit: m}\n    source: {format: csv, paths: [b.csv]}\n",
			`x.yaml:8: levels[0].id: "A" is already defined by tanks[0]`},
		{"discharges into nothing", strings.Replace(tank, "outlet: {elevation: 0 m}", "outlet: {elevation: 0 m, discharges_into: C}", 1),
			`tanks[0].outlet.discharges_into: no tank or level "C"`},
		{"influx without site", strings.Replace(tank, "format: csv, paths: [a.csv]", "format: influx", 1),
			"x.yaml:2: tanks[0].source.format: influx needs a site with an influx connection"},
		{"site without influx", "sites: [{id: s}]\n" + strings.Replace(tank, "format: csv, paths: [a.csv]", "format: influx", 1),
			`x.yaml:3: tanks[0].source.format: site "s" has no influx connection`},
		{"two sites need a site", "sites: [{id: a}, {id: b}]\n" + tank, "x.yaml:3: tanks[0].site: required when there is more than one site"},
		{"defaults id", "defaults: {id: X}\n" + tank, "x.yaml:1: defaults.id: a tank id cannot have a default"},
		{"defaults problem named once", "defaults: {detection: {cusum_k: -1}}\n" + tank + strings.Replace(tank, "tanks:\n  - id: A", "  - id: B", 1),
			"x.yaml:1: defaults.detection.cusum_k: must be positive"},
		{"cone too short", strings.Replace(tank, "{shape: sphere, diameter: 2 m}", "{shape: cone_bottom_cylinder, diameter: 2 m, height: 1 m, cone_height: 1 m}", 1),
			"tanks[0].geometry.cone_height: must be less than the height"},
		{"command as string", tank + "outputs: {alert: {command: ls}}\n", "x.yaml:7: outputs.alert.command: want a list"},
		{"both tokens", "sites: [{id: s, influx: {url: 'http://h', bucket: b, token_env: E, token_file: f}}]\n" + tank,
			"x.yaml:1: sites[0].influx.token_env: give token_env or token_file, not both"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, err := Parse([]byte(tc.doc), "x.yaml")
			if err == nil || !strings.Contains(err.Error(), tc.want) {
				t.Errorf("Parse error = %v\nwant it to contain %q", err, tc.want)
			}
		})
	}
	// A problem in the defaults block is listed once, not once per tank.
	_, err := Parse([]byte("defaults: {detection: {cusum_k: -1}}\n"+tank+strings.Replace(tank, "tanks:\n  - id: A", "  - id: B", 1)), "x.yaml")
	if n := strings.Count(err.Error(), "cusum_k"); n != 1 {
		t.Errorf("defaults problem listed %d times, want once:\n%v", n, err)
	}
}

func TestStrappingFile(t *testing.T) {
	dir := t.TempDir()
	os.WriteFile(filepath.Join(dir, "t.csv"), []byte("level_mm,volume_L\n# comment\n0,0\n500,900\n1000,2100\n"), 0o644)
	os.WriteFile(filepath.Join(dir, "bad.csv"), []byte("level,volume\n0,0\n"), 0o644)
	doc := "tanks:\n  - id: A\n    geometry: {shape: strapping_table, file: %s}\n    outlet: {elevation: 0 m}\n    sensor: {kind: depth, unit: m}\n    source: {format: csv, paths: [a.csv]}\n"
	c, err := Parse([]byte(strings.Replace(doc, "%s", "t.csv", 1)), filepath.Join(dir, "plant.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	want := []StrappingPoint{{0, 0}, {0.5, 0.9}, {1, 2.1}}
	got := c.Tanks[0].Geometry.Strapping
	for i := range want {
		if math.Abs(got[i].LevelM-want[i].LevelM) > 1e-12 || math.Abs(got[i].VolumeM3-want[i].VolumeM3) > 1e-12 {
			t.Errorf("point %d = %v, want %v", i, got[i], want[i])
		}
	}
	os.WriteFile(filepath.Join(dir, "down.csv"), []byte("level_m,volume_m3\n0,0\n1,2\n0.5,3\n"), 0o644)
	_, err = Parse([]byte(strings.Replace(doc, "%s", "down.csv", 1)), filepath.Join(dir, "plant.yaml"))
	if err == nil || !strings.Contains(err.Error(), "plant.yaml:3: tanks[0].geometry.file: down.csv:4: levels must increase strictly") {
		t.Errorf("falling level in a file: error = %v", err)
	}
	for _, name := range []string{"bad.csv", "missing.csv"} {
		_, err := Parse([]byte(strings.Replace(doc, "%s", name, 1)), filepath.Join(dir, "plant.yaml"))
		if err == nil || !strings.Contains(err.Error(), "tanks[0].geometry.file") {
			t.Errorf("%s: error = %v, want a problem at tanks[0].geometry.file", name, err)
		}
	}
}

func TestAnchorsAndMergeKeys(t *testing.T) {
	const doc = `
common: &geo {shape: vertical_cylinder, diameter: 1 m, height: 2 m}
tanks:
  - id: A
    geometry: *geo
    outlet: &out {elevation: 0.1 m}
    sensor: {kind: depth, unit: m}
    source: {format: csv, paths: [a.csv]}
  - id: B
    geometry: {<<: *geo, diameter: 3 m}
    outlet: *out
    sensor: {kind: depth, unit: m}
    source: {format: csv, paths: [a.csv]}
`
	_, err := Parse([]byte(doc), "x.yaml")
	if err == nil || !strings.Contains(err.Error(), "x.yaml:2: common: unknown key") {
		t.Fatalf("want exactly the unknown key 'common', got %v", err)
	}
	c, err := Parse([]byte(strings.Replace(doc, "common: &geo", "defaults: {description: shared}\nx-common: &geo", 1)), "x.yaml")
	if err == nil {
		t.Fatalf("x-common: want unknown key, got %+v", c)
	}
	ve := err.(*ValidationError)
	if len(ve.Problems) != 1 {
		t.Fatalf("problems = %v, want only the unknown key", ve.Problems)
	}
}

func TestInfluxToken(t *testing.T) {
	dir := t.TempDir()
	os.WriteFile(filepath.Join(dir, "tok"), []byte("  abc\n"), 0o600)
	t.Setenv("DS_TEST_TOKEN", "xyz")
	for _, tc := range []struct {
		in   Influx
		want string
		err  bool
	}{
		{Influx{TokenEnv: "DS_TEST_TOKEN"}, "xyz", false},
		{Influx{TokenFile: filepath.Join(dir, "tok")}, "abc", false},
		{Influx{}, "", false},
		{Influx{TokenEnv: "DS_TEST_TOKEN_UNSET"}, "", true},
		{Influx{TokenFile: filepath.Join(dir, "none")}, "", true},
	} {
		got, err := tc.in.Token()
		if got != tc.want || (err != nil) != tc.err {
			t.Errorf("Token(%+v) = %q, %v; want %q, error %v", tc.in, got, err, tc.want, tc.err)
		}
	}
}

// sensor.damping is read as a duration, defaults to 0 and refuses negative
// values with the field named (common practice: transmitter damping is set
// in seconds).
func TestSensorDamping(t *testing.T) {
	for _, tc := range []struct {
		val     string
		want    time.Duration
		problem string
	}{
		{"", 0, ""},
		{"damping: 20 s", 20 * time.Second, ""},
		{"damping: 1.5 min", 90 * time.Second, ""},
		{"damping: -3 s", 0, "sensor.damping"},
	} {
		extra := ""
		if tc.val != "" {
			extra = ", " + tc.val
		}
		src := "tanks:\n  - id: D1\n    geometry: {shape: vertical_cylinder, diameter: 2 m, height: 3 m}\n    outlet: {diameter: 50 mm, elevation: 0 m}\n    sensor: {kind: depth, unit: m" + extra + "}\n    source: {format: csv, paths: [x.csv]}\n"
		c, err := Parse([]byte(src), "damping.yaml")
		if tc.problem != "" {
			if err == nil || !strings.Contains(err.Error(), tc.problem) {
				t.Errorf("%q: got %v, want a problem naming %s", tc.val, err, tc.problem)
			}
			continue
		}
		if err != nil {
			t.Errorf("%q: %v", tc.val, err)
			continue
		}
		if got := c.Tanks[0].Sensor.Damping; got != tc.want {
			t.Errorf("%q: damping %v, want %v", tc.val, got, tc.want)
		}
	}
}

// Merge keys that merge mappings that merge mappings (nine times over, ten
// levels deep: 9^10 paths through 11 mappings in a 600-byte file) are
// resolved once per mapping, not once per path: the decoder computes the
// entries of each mapping once (a count, not a time, is checked).
func TestMergeKeyFanOutBounded(t *testing.T) {
	var b strings.Builder
	b.WriteString("a0: &a0 {k: 1}\n")
	for i := 1; i <= 10; i++ {
		fmt.Fprintf(&b, "a%d: &a%d {<<: [%s], k%d: 1}\n", i, i, strings.TrimSuffix(strings.Repeat(fmt.Sprintf("*a%d,", i-1), 9), ","), i)
	}
	b.WriteString("defaults: {<<: *a10}\n")
	var doc yaml.Node
	if err := yaml.Unmarshal([]byte(b.String()), &doc); err != nil {
		t.Fatal(err)
	}
	d := &decoder{fromDefaults: map[*yaml.Node]bool{}}
	root := doc.Content[0]
	es := d.entries(root.Content[len(root.Content)-1], "defaults", 0)
	if len(es) != 10 {
		t.Errorf("%d keys merged, want 10 (k1 ... k10; merges deeper than 10 levels are not followed)", len(es))
	}
	if d.calls > 30 {
		t.Errorf("%d mappings resolved for 12 mapping nodes: merges are expanded per path", d.calls)
	}
}

// The webhook's signing secret comes from the environment or a file, never
// the config; giving both is a mistake.
func TestWebhookSecretSettings(t *testing.T) {
	const tank = `
tanks:
  - id: A
    geometry: {shape: sphere, diameter: 2 m}
    outlet: {elevation: 0}
    sensor: {kind: pressure, unit: psi}
    source: {format: csv, paths: [a.csv]}
outputs:
  alert:
`
	for _, c := range []struct{ alert, want string }{
		{"    webhook_secret: hunter2\n", "secrets are not allowed"},
		{"    webhook_secret_env: X\n    webhook_secret_file: f\n", "not both"},
	} {
		_, err := Parse([]byte(tank+c.alert), "p.yaml")
		if err == nil || !strings.Contains(err.Error(), c.want) || strings.Contains(err.Error(), "hunter2") {
			t.Errorf("%q: %v, want a problem saying %q (and never the secret)", c.alert, err, c.want)
		}
	}
	c, err := Parse([]byte(tank+"    webhook_secret_env: DRAINSIGHT_TEST_SECRET\n"), "p.yaml")
	if err != nil {
		t.Fatal(err)
	}
	t.Setenv("DRAINSIGHT_TEST_SECRET", " k3y \n")
	if s, err := c.Outputs.Alert.Secret(); err != nil || s != "k3y" {
		t.Errorf("secret %q, %v; want k3y", s, err)
	}
}

// LoadContext stops waiting for a parse when its context is done (a signal
// during a slow parse), and otherwise returns what Load returns.
func TestLoadContext(t *testing.T) {
	path := filepath.Join(t.TempDir(), "plant.yaml")
	doc := "tanks:\n  - id: A\n    geometry: {shape: sphere, diameter: 2 m}\n    outlet: {elevation: 0 m}\n    sensor: {kind: depth, unit: m}\n    source: {format: csv, paths: [a.csv]}\n"
	if err := os.WriteFile(path, []byte(doc), 0o644); err != nil {
		t.Fatal(err)
	}
	c, err := LoadContext(context.Background(), path)
	if err != nil || len(c.Tanks) != 1 || c.Tanks[0].ID != "A" {
		t.Fatalf("LoadContext: %v %+v", err, c)
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if _, err := LoadContext(ctx, path); !errors.Is(err, context.Canceled) || !strings.Contains(err.Error(), path) {
		t.Errorf("cancelled: %v, want context.Canceled naming the file", err)
	}
}
