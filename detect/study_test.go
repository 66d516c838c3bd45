package detect

import (
	"flag"
	"testing"
)

var fullStudy = flag.Bool("study", false, "run the full detection study and print its table")

func TestStudySmall(t *testing.T) {
	opt := StudyOptions{Tanks: 20, Faults: []string{FaultRestrictionAbrupt}, MagnitudesPct: []float64{20},
		HealthyTanks: 10, HealthyYears: 1}
	if *fullStudy {
		opt = StudyOptions{}
	}
	rows := Study(opt)
	t.Log("\n" + FormatStudyTable(rows))
	if *fullStudy {
		return
	}
	r := rows[0]
	if r.DetectedPct < 95 {
		t.Errorf("20 %% step restriction detected in %.0f %% of tanks, want >= 95 %%", r.DetectedPct)
	}
	if r.CorrectPct < 90 {
		t.Errorf("20 %% step restriction classified right in %.0f %%, want >= 90 %%", r.CorrectPct)
	}
}

func BenchmarkStudyCell(b *testing.B) {
	opt := StudyOptions{Tanks: 5, Faults: []string{FaultRestrictionGradual}, MagnitudesPct: []float64{10}, HealthyTanks: 1, HealthyYears: 0.5}
	for b.Loop() {
		Study(opt)
	}
}

func TestStudySensor(t *testing.T) {
	opt := StudyOptions{Tanks: 20}
	if *fullStudy {
		opt = StudyOptions{}
	}
	rows := StudySensor(opt)
	t.Log("\n" + FormatSensorStudyTable(rows))
	for _, r := range rows {
		if r.NotOutletPct != 100 {
			t.Errorf("%s %g %s: %.1f %% of tanks never reported as an outlet fault, want 100 %%", r.Fault, r.Size, r.Unit, r.NotOutletPct)
		}
	}
}
