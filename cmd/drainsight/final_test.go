package main

import (
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"drainsight/ingest"
	"drainsight/model"
	"drainsight/model/sim"
)

// endOfDataPlant writes a tank whose file ends 12 min into its second
// drain (a 30 min drain) and returns the config path, the truth and the
// time of the last sample. The first drain is complete and followed by an
// hour's pause.
func endOfDataPlant(t *testing.T, dir string, extraDetection string) (string, []sim.DrainTruth, time.Time) {
	t.Helper()
	tk := model.Tank{ID: "E1", Shape: model.VerticalCylinder{DiameterM: 1.6, InternalHeightM: 2.4}, DatumKnown: true}
	ht, err := model.NewHeadTransform(&tk)
	if err != nil {
		t.Fatal(err)
	}
	k := ht.F(2.0) / 1800 // a full drain from 2 m takes 30 min
	from := time.Date(2026, 7, 1, 0, 0, 0, 0, time.UTC)
	ser, truth := sim.SimulateSequence(sim.SequenceSpec{
		Tank: tk, KM25s: k, SampleEvery: 10 * time.Second, PhaseS: 3, NoiseM: 0.002, StartHeadM: 2, From: from,
		Steps: []sim.Step{
			{Kind: sim.StepHold, Duration: 8 * time.Hour},
			{Kind: sim.StepDrain, ToHeadM: 0},
			{Kind: sim.StepHold, Duration: time.Hour},
			{Kind: sim.StepFill, ToHeadM: 2, RateM3s: 2e-3},
			{Kind: sim.StepHold, Duration: 2 * time.Hour},
			{Kind: sim.StepDrain, ToHeadM: 0},
		},
	}, rand.New(rand.NewPCG(5, 8)))
	cut := truth[1].StartNs + int64(12*time.Minute)
	n := 0
	for n < ser.Len() && ser.TimeNs[n] <= cut {
		n++
	}
	f, err := os.Create(filepath.Join(dir, "e1.csv"))
	if err != nil {
		t.Fatal(err)
	}
	if err := ingest.WriteCSV(f, "E1", ser.TimeNs[:n], ser.HeadM[:n]); err != nil {
		t.Fatal(err)
	}
	f.Close()
	cfg := filepath.Join(dir, "plant.yaml")
	yaml := fmt.Sprintf(`tanks:
  - id: E1
    geometry: {shape: vertical_cylinder, diameter: 1.6 m, height: 2.4 m}
    outlet: {diameter: 60 mm, elevation: 0 m}
    sensor: {kind: depth, unit: m}
    source: {format: csv, paths: [%s]}
    detection: {settle: 5 min%s}
outputs: {directory: %s, state_file: %s}
`, filepath.Join(dir, "e1.csv"), extraDetection, filepath.Join(dir, "out"), filepath.Join(dir, "state.db"))
	if err := os.WriteFile(cfg, []byte(yaml), 0o644); err != nil {
		t.Fatal(err)
	}
	return cfg, truth, time.Unix(0, ser.TimeNs[n-1]).UTC()
}

// TestScanFinal: a drain running into the end of the data is pending
// (counted, not fitted) in a plain scan, fitted as a partial drain with
// --final or when --now is past the last sample by more than the settle
// delay; -v lists every fall with its times and outcome.
func TestScanFinal(t *testing.T) {
	for _, c := range []struct {
		name    string
		args    func(last time.Time) []string
		fitted  int
		summary string
	}{
		{"plain", func(time.Time) []string { return nil }, 1,
			"Falls: 2 seen, 1 drains (1 fitted), 1 pending"},
		{"final", func(time.Time) []string { return []string{"--final"} }, 2,
			"Falls: 2 seen, 2 drains (2 fitted)."},
		{"now past settle", func(last time.Time) []string { return []string{"--now", last.Add(time.Hour).Format(time.RFC3339)} }, 2,
			"Falls: 2 seen, 2 drains (2 fitted)."},
		{"now within settle", func(last time.Time) []string {
			return []string{"--now", last.Add(2 * time.Minute).Format(time.RFC3339)}
		}, 1,
			"1 pending"},
	} {
		t.Run(c.name, func(t *testing.T) {
			dir := t.TempDir()
			cfg, truth, last := endOfDataPlant(t, dir, "")
			out, stderr, err := runArgs(t, append([]string{"scan", "--new-state", "--config", cfg, "-v"}, c.args(last)...)...)
			if err != nil {
				t.Fatalf("scan: %v\n%s\n%s", err, out, stderr)
			}
			if !strings.Contains(out, c.summary) {
				t.Errorf("summary lacks %q:\n%s", c.summary, out)
			}
			evs := readJSONL(t, filepath.Join(dir, "out", "events.jsonl"))
			if len(evs) != c.fitted {
				t.Fatalf("events: got %d, want %d", len(evs), c.fitted)
			}
			if !strings.Contains(stderr, "msg=fall") || !strings.Contains(stderr, "outcome=drain") {
				t.Errorf("-v does not list the falls:\n%s", stderr)
			}
			if c.fitted == 2 {
				e := evs[1]
				if e["complete"] != false {
					t.Errorf("drain cut by the end of the data: complete %v, want false", e["complete"])
				}
				start, _ := time.Parse(time.RFC3339Nano, e["start"].(string))
				if d := start.Sub(time.Unix(0, truth[1].StartNs)); d < 0 || d > time.Minute {
					t.Errorf("partial drain starts %v after the valve opened, want within 1 min (transient)", d)
				}
				end, _ := time.Parse(time.RFC3339Nano, e["end"].(string))
				if d := last.Sub(end); d < 0 || d > 30*time.Second {
					t.Errorf("partial drain ends %v before the last sample, want within 30 s", d)
				}
				// a second pass over the same data fits nothing again
				out, _, err := runArgs(t, append([]string{"scan", "--new-state", "--config", cfg}, c.args(last)...)...)
				if err != nil || !strings.Contains(out, "0 drains") {
					t.Errorf("second scan: %v\n%s", err, out)
				}
			}
		})
	}
}

// TestCheckWarnsRejectAll: check samples the data and warns when the
// settings reject every fall in it (here a minimum duration longer than
// any drain).
func TestCheckWarnsRejectAll(t *testing.T) {
	dir := t.TempDir()
	cfg, _, _ := endOfDataPlant(t, dir, ", min_drain_duration: 2 h")
	out, _, err := runArgs(t, "check", "--config", cfg, "--offline")
	if err != nil {
		t.Fatalf("check: %v\n%s", err, out)
	}
	if !strings.Contains(out, "warning: tank E1: the settings reject all 2 falls") || !strings.Contains(out, "too short") {
		t.Errorf("check output lacks the warning:\n%s", out)
	}
	dir = t.TempDir()
	cfg, _, _ = endOfDataPlant(t, dir, "")
	out, _, err = runArgs(t, "check", "--config", cfg, "--offline")
	if err != nil || strings.Contains(out, "warning") {
		t.Errorf("check with default settings: %v\n%s", err, out)
	}
}
