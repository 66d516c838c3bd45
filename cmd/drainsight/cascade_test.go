package main

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"drainsight/ingest"
	"drainsight/model"
)

// cascadeHistory integrates an upper tank U whose outlet discharges into a
// lower tank L by classical RK4 in steps of 0.1 s (written here,
// independent of the project's simulator):
//
//	A_U dhU/dt = -kU sgn(Δ) sqrt(|Δ|) [valve U open],  Δ = hU - max(hL - zU, 0)
//	A_L dhL/dt = +kU sgn(Δ) sqrt(|Δ|) [valve U open] - kL sqrt(hL) [valve L open] + q
//
// hU is U's head above its outlet, hL L's level above its outlet and
// bottom, zU the height of U's outlet above L's bottom. Each cycle: both
// valves shut for an hour, U drains into L (L shut, so it fills and the
// outlet of U is soon submerged) for 40 min, both shut, then L drains to
// empty while a pump refills U. Samples every 10 s with 1 mm noise.
func cascadeHistory(cycles int, aU, aL, kU, kL, zU float64, rng *rand.Rand) (ts []int64, hu, hl []float64) {
	const step, every = 0.1, 10.0
	u, l := 1.6, 0.0
	t := 0.0
	next := 0.0
	run := func(dur float64, openU, openL bool, pump float64) {
		f := func(u, l float64) (float64, float64) {
			du, dl := 0.0, 0.0
			if openU {
				d := max(u, 0) - max(l-zU, 0)
				q := kU * math.Copysign(math.Sqrt(math.Abs(d)), d)
				du -= q / aU
				dl += q / aL
			}
			if openL {
				dl -= kL * math.Sqrt(max(l, 0)) / aL
			}
			du += pump / aU
			return du, dl
		}
		for end := t + dur; t < end-1e-9; t += step {
			if t >= next-1e-9 {
				ts = append(ts, int64(t*1e9))
				hu = append(hu, u+0.001*rng.NormFloat64())
				hl = append(hl, l+0.001*rng.NormFloat64())
				next += every
			}
			a1, b1 := f(u, l)
			a2, b2 := f(u+step/2*a1, l+step/2*b1)
			a3, b3 := f(u+step/2*a2, l+step/2*b2)
			a4, b4 := f(u+step*a3, l+step*b3)
			u += step / 6 * (a1 + 2*a2 + 2*a3 + a4)
			l += step / 6 * (b1 + 2*b2 + 2*b3 + b4)
			if u > 1.6 {
				u = 1.6
			}
		}
	}
	for range cycles {
		run(3600, false, false, 0)
		run(2400, true, false, 0)
		run(1800, false, false, 0)
		run(5400, false, true, 0.0008)
	}
	run(3600, false, false, 0)
	return ts, hu, hl
}

// TestScanCascade: an upper tank discharging into a lower one, configured
// with outlet.discharges_into and the tanks' base elevations, is fitted on
// the head across its outlet: every drain of the upper tank comes out with
// method "submerged", K within 1 % of the integrated truth and an exponent
// near 1/2 (as a free outlet the same drains give an exponent far from it,
// TestSubmergedOutletTwoTanks in model).
// cascadePlant writes the two-tank plant of cascadeHistory (an upper tank
// UP draining into LO, six cycles) as CSV files and a config; it returns
// the config's path and UP's true K.
func cascadePlant(t *testing.T) (path string, kU float64) {
	t.Helper()
	const (
		dU, dL = 1.2, 1.4 // m
		zU     = 0.5      // the upper outlet above the lower tank's bottom, m
	)
	aU, aL := math.Pi/4*dU*dU, math.Pi/4*dL*dL
	// 40 mm and 50 mm outlets with Cd 0.61 (sharp-edged orifice, common practice)
	kU = 0.61 * math.Pi / 4 * 0.04 * 0.04 * model.Sqrt2g
	kL := 0.61 * math.Pi / 4 * 0.05 * 0.05 * model.Sqrt2g
	ts, hu, hl := cascadeHistory(6, aU, aL, kU, kL, zU, rand.New(rand.NewPCG(3, 4)))
	start := time.Date(2031, 5, 1, 0, 0, 0, 0, time.UTC).UnixNano()
	for i := range ts {
		ts[i] += start
	}
	dir := t.TempDir()
	for name, h := range map[string][]float64{"UP": hu, "LO": hl} {
		f, err := os.Create(filepath.Join(dir, name+".csv"))
		if err != nil {
			t.Fatal(err)
		}
		if err := ingest.WriteCSV(f, name, ts, h); err != nil {
			t.Fatal(err)
		}
		f.Close()
	}
	// The upper tank's bottom stands 0.5 m above the lower one's, its
	// outlet at its bottom.
	cfg := fmt.Sprintf(`tanks:
  - id: UP
    base_elevation: %g m
    geometry: {shape: vertical_cylinder, diameter: %g m, height: 2 m}
    outlet: {diameter: 40 mm, elevation: 0 m, discharges_into: LO}
    sensor: {kind: depth, unit: m}
    source: {format: csv, paths: [UP.csv]}
  - id: LO
    geometry: {shape: vertical_cylinder, diameter: %g m, height: 2.5 m}
    outlet: {diameter: 50 mm, elevation: 0 m}
    sensor: {kind: depth, unit: m}
    source: {format: csv, paths: [LO.csv]}
outputs: {directory: out}
`, zU, dU, dL)
	path = filepath.Join(dir, "plant.yaml")
	if err := os.WriteFile(path, []byte(cfg), 0o644); err != nil {
		t.Fatal(err)
	}
	return path, kU
}

func TestScanCascade(t *testing.T) {
	path, kU := cascadePlant(t)
	dir := filepath.Dir(path)
	out, stderr, err := runArgs(t, "scan", "--new-state", "--config", path, "--final")
	if err != nil {
		t.Fatalf("scan: %v\n%s\n%s", err, out, stderr)
	}
	up := 0
	for _, e := range readJSONL(t, filepath.Join(dir, "out", "events.jsonl")) {
		if e["tank"] != "UP" {
			continue
		}
		up++
		k, n := e["k_m25_s"].(float64), e["exponent"].(float64)
		t.Logf("UP drain at %v: method %v, K/K_true %.4f, exponent %.3f, grade %v", e["start"], e["method"], k/kU, n, e["quality"])
		if e["method"] != "submerged" || math.Abs(k/kU-1) > 0.01 || math.Abs(n-0.5) > 0.05 {
			t.Errorf("UP drain at %v: method %v, K/K_true %.4f, exponent %.3f; want submerged, within 1 %%, 0.5 ± 0.05", e["start"], e["method"], k/kU, n)
		}
	}
	if up < 5 {
		t.Errorf("%d drains of UP written, want the 6 simulated (the first may fall in the warm-up)\n%s", up, out)
	}
}

// A basin that is not monitored, configured under levels, receives UP's
// outlet: scan reads its level for the head across the outlet, UP's drains
// come out submerged with K within 1 % of the truth and an exponent of
// 0.5 ± 0.05 (as with LO a tank), LO itself is not analysed, and check
// lists it as a level.
func TestScanCascadeIntoLevel(t *testing.T) {
	path, kU := cascadePlant(t)
	dir := filepath.Dir(path)
	cfg := `tanks:
  - id: UP
    base_elevation: 0.5 m
    geometry: {shape: vertical_cylinder, diameter: 1.2 m, height: 2 m}
    outlet: {diameter: 40 mm, elevation: 0 m, discharges_into: LO}
    sensor: {kind: depth, unit: m}
    source: {format: csv, paths: [UP.csv]}
levels:
  - id: LO
    description: receiving basin
    height: 2.5 m
    sensor: {kind: depth, unit: m}
    source: {format: csv, paths: [LO.csv]}
outputs: {directory: level-out}
`
	lp := filepath.Join(dir, "level.yaml")
	if err := os.WriteFile(lp, []byte(cfg), 0o644); err != nil {
		t.Fatal(err)
	}
	out, _, err := runArgs(t, "check", "--config", lp, "--offline")
	if err != nil || !strings.Contains(out, "1 tanks, 1 levels") || !regexp.MustCompile(`LO\s+level\s+0-2.5 m`).MatchString(out) || strings.Contains(out, "warning") {
		t.Errorf("check: %v\n%s", err, out)
	}
	if out, stderr, err := runArgs(t, "scan", "--new-state", "--config", lp, "--final"); err != nil {
		t.Fatalf("scan: %v\n%s\n%s", err, out, stderr)
	}
	up := 0
	for _, e := range readJSONL(t, filepath.Join(dir, "level-out", "events.jsonl")) {
		if e["tank"] != "UP" {
			t.Errorf("event of %v: only UP is analysed", e["tank"])
			continue
		}
		up++
		k, n := e["k_m25_s"].(float64), e["exponent"].(float64)
		if e["method"] != "submerged" || math.Abs(k/kU-1) > 0.01 || math.Abs(n-0.5) > 0.05 {
			t.Errorf("UP drain at %v: method %v, K/K_true %.4f, exponent %.3f; want submerged, within 1 %%, 0.5 ± 0.05", e["start"], e["method"], k/kU, n)
		}
	}
	if up < 5 {
		t.Errorf("%d drains of UP written, want the 6 simulated (the first may fall in the warm-up)", up)
	}
}

// check segments a tank in cascade on the head across its outlet, as scan
// does: UP's drains into the filling LO are fitted, so no setting is said
// to reject them all (segmented on its own head they look like drains with
// inflow and are all rejected).
func TestCheckCascade(t *testing.T) {
	path, _ := cascadePlant(t)
	out, _, err := runArgs(t, "check", "--config", path)
	if err != nil || strings.Contains(out, "warning: tank UP") {
		t.Errorf("check of the cascade: %v\n%s", err, out)
	}
}

// TestConfigLinks: outlet.discharges_into names another tank of the same
// site read the same way; every other use is refused with its field.
func TestConfigLinks(t *testing.T) {
	tank := func(id, into, format string) string {
		src := "{format: csv, paths: [x.csv]}"
		if format == "influx" {
			src = "{format: influx, measurement: level, field: value}"
		}
		link := ""
		if into != "" {
			link = ", discharges_into: " + into
		}
		return fmt.Sprintf("  - id: %s\n    geometry: {shape: vertical_cylinder, diameter: 1 m, height: 2 m}\n    outlet: {diameter: 40 mm, elevation: 0 m%s}\n    sensor: {kind: depth, unit: m}\n    source: %s\n", id, link, src)
	}
	site := "sites:\n  - id: s1\n    influx: {url: http://127.0.0.1:8086, org: o, bucket: b, token_env: DRAINSIGHT_TEST_TOKEN}\n"
	cases := []struct {
		name, yaml, want string
	}{
		{"self", "tanks:\n" + tank("A", "A", "csv"), "cannot discharge into itself"},
		{"unknown", "tanks:\n" + tank("A", "B", "csv"), `no tank or level "B"`},
		{"files into InfluxDB", site + "tanks:\n" + tank("A", "B", "csv") + tank("B", "", "influx"), "both read from files or both from the site's InfluxDB"},
		{"InfluxDB into InfluxDB", site + "tanks:\n" + tank("A", "B", "influx") + tank("B", "", "influx"), ""},
	}
	for _, c := range cases {
		dir := t.TempDir()
		path := filepath.Join(dir, "plant.yaml")
		if err := os.WriteFile(path, []byte(c.yaml), 0o644); err != nil {
			t.Fatal(err)
		}
		_, _, err := runArgs(t, "check", "--config", path)
		if c.want == "" {
			if err != nil && strings.Contains(err.Error(), "discharges_into") {
				t.Errorf("%s: refused: %v", c.name, err)
			}
			continue
		}
		if err == nil || !strings.Contains(err.Error(), "plant.yaml:") || !strings.Contains(err.Error(), "outlet.discharges_into") || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: err %v; want an error naming the file, line and outlet.discharges_into with %q", c.name, err, c.want)
		}
	}
}

// TestScanLinkedReceiverMissing: when the receiving tank's files cannot be
// read, the linked tank fails too (nothing of it is fitted as a free
// outlet), and each failure names its tank once.
func TestScanLinkedReceiverMissing(t *testing.T) {
	dir := t.TempDir()
	ts := []int64{time.Date(2031, 5, 1, 0, 0, 0, 0, time.UTC).UnixNano()}
	f, err := os.Create(filepath.Join(dir, "UP.csv"))
	if err != nil {
		t.Fatal(err)
	}
	if err := ingest.WriteCSV(f, "UP", ts, []float64{1}); err != nil {
		t.Fatal(err)
	}
	f.Close()
	cfg := `tanks:
  - id: UP
    geometry: {shape: vertical_cylinder, diameter: 1 m, height: 2 m}
    outlet: {diameter: 40 mm, elevation: 0 m, discharges_into: LO}
    sensor: {kind: depth, unit: m}
    source: {format: csv, paths: [UP.csv]}
  - id: LO
    geometry: {shape: vertical_cylinder, diameter: 1 m, height: 2 m}
    outlet: {diameter: 40 mm, elevation: 0 m}
    sensor: {kind: depth, unit: m}
    source: {format: csv, paths: [LO-missing.csv]}
outputs: {directory: out}
`
	path := filepath.Join(dir, "plant.yaml")
	if err := os.WriteFile(path, []byte(cfg), 0o644); err != nil {
		t.Fatal(err)
	}
	out, _, err := runArgs(t, "scan", "--new-state", "--config", path)
	if err == nil {
		t.Fatalf("scan succeeded with the receiving tank's files missing:\n%s", out)
	}
	var up string
	for _, l := range strings.Split(out, "\n") {
		if strings.HasPrefix(l, "FAILED UP:") {
			up = l
		}
	}
	if up == "" || strings.Count(up, "UP") != 1 || !strings.Contains(up, "the level of LO") {
		t.Errorf("want one FAILED line naming UP once and the level of LO; got %q in\n%s", up, out)
	}
	if strings.Count(err.Error(), "tank UP") != 1 {
		t.Errorf("error names UP %d times: %v", strings.Count(err.Error(), "tank UP"), err)
	}
}

// TestInfluxCascadeMatchesFiles: the cascade of TestScanCascade loaded into
// InfluxDB and scanned from there, window by window, gives the same drains
// and K as the scan of the same readings from files: the receiving level
// comes with the discharging tank's samples in each window.
func TestInfluxCascadeMatchesFiles(t *testing.T) {
	url, bucket := influxOrSkip(t)
	const zU = 0.5
	aU, aL := math.Pi/4*1.2*1.2, math.Pi/4*1.4*1.4
	kU := 0.61 * math.Pi / 4 * 0.04 * 0.04 * model.Sqrt2g
	kL := 0.61 * math.Pi / 4 * 0.05 * 0.05 * model.Sqrt2g
	ts, hu, hl := cascadeHistory(4, aU, aL, kU, kL, zU, rand.New(rand.NewPCG(8, 9)))
	start := time.Date(2031, 6, 1, 0, 0, 0, 0, time.UTC).UnixNano()
	for i := range ts {
		ts[i] += start
	}
	l, err := newDemoLoader(url, bucket, "", os.Getenv("DRAINSIGHT_INFLUX_TOKEN"))
	if err != nil {
		t.Fatal(err)
	}
	defer l.Close()
	files := t.TempDir()
	for id, h := range map[string][]float64{"CASC-UP": hu, "CASC-LO": hl} {
		if err := l.load(context.Background(), id, ts, h, nil); err != nil {
			t.Fatal(err)
		}
		f, err := os.Create(filepath.Join(files, id+".csv"))
		if err != nil {
			t.Fatal(err)
		}
		if err := ingest.WriteCSV(f, id, ts, h); err != nil {
			t.Fatal(err)
		}
		f.Close()
	}
	tanks := func(src func(id string) string) string {
		return fmt.Sprintf(`  - id: CASC-UP
    base_elevation: %g m
    geometry: {shape: vertical_cylinder, diameter: 1.2 m, height: 2 m}
    outlet: {diameter: 40 mm, elevation: 0 m, discharges_into: CASC-LO}
    sensor: {kind: depth, unit: m}
    source: %s
  - id: CASC-LO
    geometry: {shape: vertical_cylinder, diameter: 1.4 m, height: 2.5 m}
    outlet: {diameter: 50 mm, elevation: 0 m}
    sensor: {kind: depth, unit: m}
    source: %s
outputs: {directory: out}
`, zU, src("CASC-UP"), src("CASC-LO"))
	}
	fileCfg := "tanks:\n" + tanks(func(id string) string { return "{format: csv, paths: [" + id + ".csv]}" })
	db := t.TempDir()
	dbCfg := fmt.Sprintf("sites:\n  - id: cascade-yard\n    influx:\n      url: %s\n      bucket: %q\n      token_env: DRAINSIGHT_INFLUX_TOKEN\n      query_window: 6 h\n      settle_delay: 0 s\n", url, bucket) +
		"tanks:\n" + tanks(func(string) string { return "{format: influx}" })
	for dir, cfg := range map[string]string{files: fileCfg, db: dbCfg} {
		path := filepath.Join(dir, "plant.yaml")
		if err := os.WriteFile(path, []byte(cfg), 0o644); err != nil {
			t.Fatal(err)
		}
		// The first scan of an InfluxDB tank reads 7 days back from --now.
		args := []string{"scan", "--new-state", "--config", path, "--final", "--now", "2031-06-03T00:00:00Z"}
		if out, stderr, err := runArgs(t, args...); err != nil {
			t.Fatalf("scan %s: %v\n%s\n%s", dir, err, out, stderr)
		}
	}
	fe, fk := drainKeys(t, filepath.Join(files, "out", "events.jsonl"))
	de, dk := drainKeys(t, filepath.Join(db, "out", "events.jsonl"))
	up := 0
	for _, k := range fe {
		if strings.HasPrefix(k, "CASC-UP|") {
			up++
		}
	}
	if up < 3 {
		t.Fatalf("only %d drains of CASC-UP from files", up)
	}
	if strings.Join(fe, "\n") != strings.Join(de, "\n") {
		t.Errorf("drains differ: %d from files, %d from InfluxDB\nonly files: %v\nonly db: %v", len(fe), len(de), minus(fe, de), minus(de, fe))
	}
	if bad := sameK(fk, dk, 1e-9); len(bad) > 0 {
		t.Errorf("K differs between files and InfluxDB: %v", bad)
	}
	// The receiving tank configured as a level (a basin read only for the
	// head across the outlet) and pulled in the same windows: CASC-UP's
	// drains and K are those of the files, and CASC-LO is not analysed.
	lv := t.TempDir()
	lvCfg := fmt.Sprintf("sites:\n  - id: cascade-yard\n    influx:\n      url: %s\n      bucket: %q\n      token_env: DRAINSIGHT_INFLUX_TOKEN\n      query_window: 6 h\n      settle_delay: 0 s\n", url, bucket) +
		fmt.Sprintf(`tanks:
  - id: CASC-UP
    base_elevation: %g m
    geometry: {shape: vertical_cylinder, diameter: 1.2 m, height: 2 m}
    outlet: {diameter: 40 mm, elevation: 0 m, discharges_into: CASC-LO}
    sensor: {kind: depth, unit: m}
    source: {format: influx}
levels:
  - id: CASC-LO
    height: 2.5 m
    sensor: {kind: depth, unit: m}
    source: {format: influx}
outputs: {directory: out}
`, zU)
	path := filepath.Join(lv, "plant.yaml")
	if err := os.WriteFile(path, []byte(lvCfg), 0o644); err != nil {
		t.Fatal(err)
	}
	if out, stderr, err := runArgs(t, "scan", "--new-state", "--config", path, "--final", "--now", "2031-06-03T00:00:00Z"); err != nil {
		t.Fatalf("scan with a level: %v\n%s\n%s", err, out, stderr)
	}
	le, lk := drainKeys(t, filepath.Join(lv, "out", "events.jsonl"))
	var fileUp []string
	for _, k := range fe {
		if strings.HasPrefix(k, "CASC-UP|") {
			fileUp = append(fileUp, k)
		}
	}
	if strings.Join(le, "\n") != strings.Join(fileUp, "\n") {
		t.Errorf("with CASC-LO a level: drains %v, want CASC-UP's from files %v", le, fileUp)
	}
	if bad := sameK(fk, lk, 1e-9); len(bad) > 0 {
		t.Errorf("with CASC-LO a level: K differs from files: %v", bad)
	}
}
