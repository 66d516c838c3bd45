package model

import "math"

// ReceivingLevel is the level history of the vessel an outlet discharges
// into (a tank in cascade, a basin), for Series.SubmergedM.
//
// LevelM is that vessel's level above its own bottom (m) at TimeNs
// (strictly increasing); OutletAboveM is the height of the discharging
// outlet above the receiving vessel's bottom (m; negative when the outlet
// lies lower). MaxGapNs is the longest interval At interpolates across;
// beyond it, and outside the history, the level is not known (NaN).
type ReceivingLevel struct {
	TimeNs       []int64
	LevelM       []float64
	OutletAboveM float64
	MaxGapNs     int64
}

// At returns the receiving level above the outlet at each of times (in
// time order), by linear interpolation between the receiving vessel's
// samples: the SubmergedM of a series sampled at times.
func (r *ReceivingLevel) At(times []int64) []float64 {
	out := make([]float64, len(times))
	j := 0
	n := len(r.TimeNs)
	for i, t := range times {
		for j < n && r.TimeNs[j] < t {
			j++
		}
		switch {
		case j < n && r.TimeNs[j] == t:
			out[i] = r.LevelM[j] - r.OutletAboveM
		case j == 0 || j == n || r.TimeNs[j]-r.TimeNs[j-1] > r.MaxGapNs:
			out[i] = math.NaN()
		default:
			t0, t1 := r.TimeNs[j-1], r.TimeNs[j]
			w := float64(t-t0) / float64(t1-t0)
			out[i] = r.LevelM[j-1] + w*(r.LevelM[j]-r.LevelM[j-1]) - r.OutletAboveM
		}
	}
	return out
}
