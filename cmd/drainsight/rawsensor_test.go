package main

import (
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

	"drainsight/ingest"
	"drainsight/model"
	"drainsight/model/sim"
)

// TestScanRawSignals runs sensors whose readings are raw transmitter signals
// end to end through "scan": a 4-20 mA depth transmitter given by two points,
// a counts converter given by gain and offset, a 4-20 mA pressure transmitter,
// and a nonlinear transmitter read through a calibration table file (monotone
// cubic). The simulator's levels are turned into readings with the same
// calibrations, and the fitted K of every drain is compared with the K the
// simulator used. A wrong conversion anywhere in config, wiring or ingest
// moves K by far more than the noise does.
func TestScanRawSignals(t *testing.T) {
	start := time.Date(2026, 6, 1, 0, 0, 0, 0, time.UTC)
	const days = 4
	// K of a 60 mm outlet with Cd 0.61: 0.61 * pi/4 * 0.06^2 * sqrt(2 g).
	k := 0.61 * math.Pi / 4 * 0.06 * 0.06 * model.Sqrt2g
	mustCal := func(c *ingest.Calibration, err error) *ingest.Calibration {
		t.Helper()
		if err != nil {
			t.Fatal(err)
		}
		return c
	}
	// Invented calibration table of a nonlinear transmitter, in counts.
	tableR := []float64{0, 1000, 2000, 3000, 4000}
	tableL := []float64{0, 0.35, 0.85, 1.6, 2.6}
	dir := t.TempDir()
	var csv strings.Builder
	csv.WriteString("# KV-BWR-1 level transmitter, bench calibration (invented)\nreading_counts,level_mm\n")
	for i := range tableR {
		fmt.Fprintf(&csv, "%g,%g\n", tableR[i], 1000*tableL[i])
	}
	if err := os.WriteFile(filepath.Join(dir, "cal.csv"), []byte(csv.String()), 0o644); err != nil {
		t.Fatal(err)
	}
	cases := []struct {
		id, sensorYAML string
		sensor         ingest.Sensor
	}{
		// 4-20 mA (IEC 60381-1) over 0-3 m.
		{"MA", "kind: depth\n      unit: mA\n      calibration: {points: [[4 mA, 0 m], [20 mA, 3 m]]}",
			ingest.Sensor{Kind: ingest.Depth, Calibration: mustCal(ingest.NewTableCalibration([]float64{4, 20}, []float64{0, 3}))}},
		// A 12-bit converter over 0-2.75 m, with a 50-count offset at empty.
		{"CT", "kind: depth\n      unit: counts\n      calibration: {gain: 0.671 mm/counts, offset: -33.55 mm}",
			ingest.Sensor{Kind: ingest.Depth, Calibration: mustCal(ingest.NewLinearCalibration(0.000671, -0.03355))}},
		// 4-20 mA over 0-40 kPa, brine of 1100 kg/m3.
		{"PR", "kind: pressure\n      unit: mA\n      density: 1100 kg/m3\n      calibration: {points: [[4, 0 kPa], [20, 40 kPa]]}",
			ingest.Sensor{Kind: ingest.Pressure, DensityKgM3: 1100, Calibration: mustCal(ingest.NewTableCalibration([]float64{4, 20}, []float64{0, 40e3}))}},
		{"TB", "kind: depth\n      unit: counts\n      calibration: {file: cal.csv}",
			ingest.Sensor{Kind: ingest.Depth, Calibration: mustCal(ingest.NewTableCalibration(tableR, tableL))}},
	}
	var yaml strings.Builder
	yaml.WriteString("tanks:\n")
	truths := map[string]sim.Truth{}
	const elev = 0.1
	for i, c := range cases {
		spec := sim.TankSpec{
			Tank:  model.Tank{ID: c.id, Shape: model.VerticalCylinder{DiameterM: 2, InternalHeightM: 2.6}, OutletElevM: elev, OutletDiamM: 0.06, DatumKnown: true},
			KM25s: k, SampleEvery: 10 * time.Second, NoiseM: 0.002, FillToM: 2.4 - elev, DrainsPerDay: 4,
		}
		ser, truth := sim.Simulate(spec, start, start.Add(days*24*time.Hour), rand.New(rand.NewPCG(11, uint64(i))))
		truths[c.id] = truth
		vals := make([]float64, ser.Len())
		for j, h := range ser.HeadM {
			vals[j] = c.sensor.Reading(h, elev)
		}
		f, err := os.Create(filepath.Join(dir, c.id+".csv"))
		if err != nil {
			t.Fatal(err)
		}
		if err := ingest.WriteCSV(f, c.id, ser.TimeNs, vals); err != nil {
			t.Fatal(err)
		}
		f.Close()
		fmt.Fprintf(&yaml, "  - id: %s\n    geometry: {shape: vertical_cylinder, diameter: 2 m, height: 2.6 m}\n    outlet: {diameter: 60 mm, elevation: %g m}\n    sensor:\n      %s\n    source: {format: csv, paths: [%s.csv]}\n",
			c.id, elev, c.sensorYAML, c.id)
	}
	yaml.WriteString("outputs: {directory: out}\n")
	cfg := filepath.Join(dir, "plant.yaml")
	if err := os.WriteFile(cfg, []byte(yaml.String()), 0o644); err != nil {
		t.Fatal(err)
	}
	if out, stderr, err := runArgs(t, "scan", "--new-state", "--config", cfg); err != nil {
		t.Fatalf("scan: %v\n%s\n%s", err, out, stderr)
	}
	byTank := map[string][]float64{}
	for _, e := range readJSONL(t, filepath.Join(dir, "out", "events.jsonl")) {
		if e["quality"] == "reject" {
			continue
		}
		tank := e["tank"].(string)
		byTank[tank] = append(byTank[tank], math.Abs(e["k_m25_s"].(float64)/k-1))
	}
	for _, c := range cases {
		errs := byTank[c.id]
		want := len(truths[c.id].Drains)
		if len(errs) < want-3 || len(errs) == 0 {
			t.Errorf("%s: %d drains fitted of %d simulated", c.id, len(errs), want)
			continue
		}
		slices.Sort(errs)
		med := errs[len(errs)/2]
		// As in TestScanEveryShape: the SE of K on one drain is of order
		// 0.1 % here, so a median error of 1 % is a conversion fault.
		if med > 0.01 {
			t.Errorf("%s: median |K error| %.3f %%, want < 1 %%", c.id, 100*med)
		}
		t.Logf("%s: %d drains, median |K error| %.3f %%, max %.3f %%", c.id, len(errs), 100*med, 100*errs[len(errs)-1])
	}
}
