package model

import (
	"flag"
	"os"
	"path/filepath"
	"testing"
)

var updateAccuracyGolden = flag.Bool("update", false, "rewrite golden files under testdata/")

// A small grid of the accuracy study: every shape, partial and complete
// drains, noise 0.5 and 5 mm, sampling 1 and 60 s, datum known; plus a few
// cells with the datum fitted. Targets: median RMSE/CRB <= 1.10, 90th
// percentile <= 1.30, no failed fit.
func TestAccuracyStudySmallGrid(t *testing.T) {
	if testing.Short() {
		t.Skip("accuracy study")
	}
	rows := AccuracyStudy(AccuracyOptions{Seed: 7, Replicates: 40, NoiseM: []float64{0.0005, 0.005}, SampleS: []float64{1, 60}})
	rows = append(rows, AccuracyStudy(AccuracyOptions{Seed: 8, Replicates: 40, DatumUnknown: true,
		Shapes: []string{"vertical", "sphere", "strapping"}, NoiseM: []float64{0.002}, SampleS: []float64{10}})...)
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

func TestAccuracyStudyDeterministic(t *testing.T) {
	opt := AccuracyOptions{Seed: 3, Replicates: 5, Shapes: []string{"cone"}, NoiseM: []float64{0.002}, SampleS: []float64{30}}
	a, b := AccuracyStudy(opt), AccuracyStudy(opt)
	if len(a) != 2 || len(b) != 2 {
		t.Fatalf("rows got %d and %d, want 2", len(a), len(b))
	}
	for i := range a {
		if a[i] != b[i] {
			t.Errorf("row %d differs between runs: %+v vs %+v", i, a[i], b[i])
		}
	}
}

func TestSummarizeAccuracy(t *testing.T) {
	rows := []AccuracyRow{{Ratio: 1}, {Ratio: 2, RelBias: -0.01, Failed: 1}, {Ratio: 3}, {Ratio: 4}, {Ratio: 5}}
	s := SummarizeAccuracy(rows)
	// Type-7 quantiles of 1..5: median 3, p90 = 4 + 0.6 = 4.6.
	if s.MedianRatio != 3 || s.P90Ratio != 4.6 || s.MaxAbsRelBias != 0.01 || s.Failed != 1 {
		t.Errorf("got %+v, want median 3, p90 4.6, bias 0.01, failed 1", s)
	}
}

// The markdown table is checked against a golden file built from fixed rows
// (go test -run FormatAccuracyTable -update rewrites it).
func TestFormatAccuracyTableGolden(t *testing.T) {
	rows := []AccuracyRow{
		{Shape: "vertical", Drain: "partial", NoiseM: 0.002, SampleS: 10, Samples: 120, Fitted: 200, TrueKM25s: 5e-3,
			RMSEM25s: 1.1e-5, CRBM25s: 1e-5, Ratio: 1.1, RelBias: 0.0004, Coverage: 0.95},
		{Shape: "sphere", Drain: "complete", DatumUnknown: true, NoiseM: 0.0005, SampleS: 1, Samples: 2400, Fitted: 199, Failed: 1,
			TrueKM25s: 5e-3, RMSEM25s: 2e-6, CRBM25s: 2.1e-6, Ratio: 0.952, RelBias: -0.0001, Coverage: 0.96},
	}
	got := FormatAccuracyTable(rows)
	path := filepath.Join("testdata", "accuracy_table.golden.md")
	if *updateAccuracyGolden {
		if err := os.WriteFile(path, []byte(got), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	want, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if got != string(want) {
		t.Errorf("table differs from %s:\ngot:\n%s\nwant:\n%s", path, got, want)
	}
}

func BenchmarkAccuracyStudy(b *testing.B) {
	for b.Loop() {
		AccuracyStudy(AccuracyOptions{Replicates: 10, NoiseM: []float64{0.002}, SampleS: []float64{10}})
	}
}
