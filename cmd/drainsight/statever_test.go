package main

import (
	"path/filepath"
	"strings"
	"testing"

	"drainsight/detect"
	"drainsight/scan"
	"drainsight/store"
)

// TestStateVersionRebuilt: a detector state written with another layout
// version is not read as if it were this one: the scan says so and
// rebuilds it from the stored fits, which are kept, and writes the current
// version back.
func TestStateVersionRebuilt(t *testing.T) {
	dir := t.TempDir()
	cfg, _, _ := endOfDataPlant(t, dir, "")
	if out, stderr, err := runArgs(t, "scan", "--new-state", "--config", cfg, "--final"); err != nil {
		t.Fatalf("scan: %v\n%s\n%s", err, out, stderr)
	}
	path := filepath.Join(dir, "state.db")
	st, err := openStore(path, true)
	if err != nil {
		t.Fatal(err)
	}
	blob, err := st.DetectorState("E1")
	if err != nil {
		t.Fatal(err)
	}
	var saved scan.SavedState
	if err := scan.DecodeState(blob, &saved); err != nil {
		t.Fatal(err)
	}
	fitsBefore, err := st.Fits("E1", 0, 1<<62)
	if err != nil || len(fitsBefore) == 0 {
		t.Fatalf("fits after the first scan: %d, %v", len(fitsBefore), err)
	}
	saved.Detector.Version = detect.StateVersion + 1
	saved.Detector.Learn = nil // what a different layout might leave
	if blob, err = scan.EncodeState(saved); err != nil {
		t.Fatal(err)
	}
	cp, _, err := st.Checkpoint("E1")
	if err != nil {
		t.Fatal(err)
	}
	if err := st.CommitTank("E1", store.TankCommit{DetectorState: blob, Checkpoint: &cp}); err != nil {
		t.Fatal(err)
	}
	st.Close()

	_, stderr, err := runArgs(t, "scan", "--new-state", "--config", cfg, "--final")
	if err != nil {
		t.Fatalf("second scan: %v\n%s", err, stderr)
	}
	if !strings.Contains(stderr, "detector state of another layout rebuilt") {
		t.Errorf("second scan did not report the rebuilt state; stderr:\n%s", stderr)
	}
	st, err = openStore(path, true)
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	if blob, err = st.DetectorState("E1"); err != nil {
		t.Fatal(err)
	}
	saved = scan.SavedState{}
	if err := scan.DecodeState(blob, &saved); err != nil {
		t.Fatal(err)
	}
	fitsAfter, _ := st.Fits("E1", 0, 1<<62)
	if saved.Detector.Version != detect.StateVersion || len(saved.Detector.Learn) != len(fitsAfter) || len(fitsAfter) != len(fitsBefore) {
		t.Errorf("after the rebuild: version %d (want %d), %d baseline drains from %d stored fits (%d before)",
			saved.Detector.Version, detect.StateVersion, len(saved.Detector.Learn), len(fitsAfter), len(fitsBefore))
	}
}
