package model

import (
	"testing"
)

// A small grid of the accuracy study: every shape, partial and complete
// drains, noise 0.5-5 mm, sampling 1-60 s. Targets: median RMSE/CRB <= 1.10,
// 90th percentile <= 1.30.
func TestAccuracyStudySmallGrid(t *testing.T) {
	if testing.Short() {
		t.Skip("accuracy study")
	}
	rows := AccuracyStudy(AccuracyOptions{Seed: 7, Replicates: 60, NoiseM: []float64{0.0005, 0.005}, SampleS: []float64{1, 60}})
	t.Log("\n" + FormatAccuracyTable(rows))
	s := SummarizeAccuracy(rows)
	if s.MedianRatio > 1.10 {
		t.Errorf("median RMSE/CRB got %.3f, want <= 1.10", s.MedianRatio)
	}
	if s.P90Ratio > 1.30 {
		t.Errorf("90th percentile RMSE/CRB got %.3f, want <= 1.30", s.P90Ratio)
	}
	if s.Failed > 0 {
		t.Errorf("failed fits got %d, want 0", s.Failed)
	}
}
