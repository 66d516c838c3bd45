package model_test

import (
	"errors"
	"math"
	"strings"
	"testing"

	"drainsight/model"
)

// TestFitFailureReasons: FitDrain's errors carry their reason (counted by
// reason in the scan summary) and name the tank once.
func TestFitFailureReasons(t *testing.T) {
	tk := &model.Tank{ID: "R1", Shape: model.VerticalCylinder{DiameterM: 1, InternalHeightM: 2}, DatumKnown: true}
	rising := model.Segment{Tank: "R1", Kind: model.Drain, EmptyHeadM: math.NaN()}
	for i := range 20 {
		rising.TimeNs = append(rising.TimeNs, int64(i)*1e10)
		rising.HeadM = append(rising.HeadM, 1+0.01*float64(i))
	}
	cases := []struct {
		name string
		tank *model.Tank
		seg  *model.Segment
		want model.FitFailure
	}{
		{"nil segment", tk, nil, model.FitBadInput},
		{"two samples", tk, &model.Segment{Tank: "R1", Kind: model.Drain, TimeNs: []int64{0, 1e10}, HeadM: []float64{1, 0.9}}, model.FitTooFewSamples},
		{"idle segment", tk, &model.Segment{Tank: "R1", Kind: model.Idle, TimeNs: []int64{0, 1e10, 2e10}, HeadM: []float64{1, 1, 1}}, model.FitBadInput},
		{"rising level", tk, &rising, model.FitNotFalling},
		{"nil tank", nil, &rising, model.FitBadInput},
	}
	for _, c := range cases {
		_, err := model.FitDrain(c.tank, c.seg, model.FitOptions{})
		var fe *model.FitError
		if !errors.As(err, &fe) || fe.Reason != c.want || model.FitFailureOf(err) != c.want {
			t.Errorf("%s: error %v, want a FitError for %v", c.name, err, c.want)
			continue
		}
		if c.seg != nil && c.seg.Tank != "" && strings.Count(err.Error(), `"R1"`) != 1 {
			t.Errorf("%s: %q does not name the tank once", c.name, err)
		}
	}
}
