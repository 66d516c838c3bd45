package detect

import "testing"

// The right kind at the first finding (issue 9 item 4): at least 95 % in
// every leak and drift row (the project's requirement). 20 tanks a row with
// 30 days of baseline keep it quick; -args -study runs the full rows.
func TestStudyLeakDrift(t *testing.T) {
	opt := StudyOptions{Tanks: 20, BaselineDays: 30}
	if testing.Short() {
		opt.Tanks = 5
	}
	if *fullStudy {
		opt = StudyOptions{}
	}
	rows := StudyLeakDrift(opt)
	t.Log("\n" + FormatKindStudyTable(rows))
	for _, r := range rows {
		if r.DetectedPct < 95 {
			t.Errorf("%s %+g %s: detected in %.1f %% of tanks, want >= 95 %%", r.Fault, r.Size, r.Unit, r.DetectedPct)
		}
		if r.RightKindPct < 95 {
			t.Errorf("%s %+g %s: right kind at the first finding in %.1f %%, want >= 95 %%", r.Fault, r.Size, r.Unit, r.RightKindPct)
		}
	}
}
