package detect

import (
	"flag"
	"os"
	"path/filepath"
	"testing"
)

var update = flag.Bool("update", false, "rewrite the golden files under testdata/")

// TestFormatStudyTableGolden renders a tiny deterministic study and compares
// it with testdata/study_tiny.golden (rewrite with -update after an
// intended change).
func TestFormatStudyTableGolden(t *testing.T) {
	rows := Study(StudyOptions{Tanks: 4, Seed: 7, Faults: []string{FaultRestrictionAbrupt, FaultRestrictionGradual},
		MagnitudesPct: []float64{20}, HealthyTanks: 2, HealthyYears: 0.5, HorizonDays: 60})
	got := FormatStudyTable(rows)
	path := filepath.Join("testdata", "study_tiny.golden")
	if *update {
		if err := os.MkdirAll("testdata", 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(path, []byte(got), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	want, err := os.ReadFile(path)
	if err != nil {
		t.Fatalf("read golden (run with -update to create): %v", err)
	}
	if got != string(want) {
		t.Errorf("study table differs from %s\ngot:\n%s\nwant:\n%s", path, got, want)
	}
}
