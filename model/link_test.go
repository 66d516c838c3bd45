package model

import (
	"math"
	"testing"
)

// TestReceivingLevelAt: linear interpolation between the receiving
// vessel's samples, the outlet's height subtracted, NaN outside the
// history and across a gap longer than MaxGapNs (hand-computed values).
func TestReceivingLevelAt(t *testing.T) {
	r := ReceivingLevel{TimeNs: []int64{10, 20, 30, 100}, LevelM: []float64{1.0, 1.2, 1.1, 0.5}, OutletAboveM: 0.4, MaxGapNs: 15}
	got := r.At([]int64{5, 10, 15, 20, 29, 30, 60, 100, 120})
	want := []float64{math.NaN(), 0.6, 0.7, 0.8, 0.71, 0.7, math.NaN(), 0.1, math.NaN()}
	for i := range want {
		if math.IsNaN(want[i]) != math.IsNaN(got[i]) || !math.IsNaN(want[i]) && math.Abs(got[i]-want[i]) > 1e-12 {
			t.Errorf("At[%d] = %v, want %v", i, got[i], want[i])
		}
	}
}
