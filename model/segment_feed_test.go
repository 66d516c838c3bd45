package model_test

import (
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"drainsight/model"
	"drainsight/model/sim"
)

// TestSegmentFeedPartWay: a drain during which a pump feeds the tank for
// part of the way (free, then fed at 20-70 % of the outlet flow at the
// start for a third of the drain time, then free again) is rejected for
// inflow on every shape; the same drain without the feed is a drain.
// Truth: the project's simulator (model/sim: free drains by the exact head
// transform, the fed part by RK4 on the volume).
func TestSegmentFeedPartWay(t *testing.T) {
	for _, sh := range boundaryShapes(t) {
		tk := sh.tank
		tk.ID, tk.DatumKnown = sh.name, true
		ht, err := model.NewHeadTransform(&tk)
		if err != nil {
			t.Fatal(err)
		}
		k := ht.F(sh.h0M) / sh.fullS
		for _, frac := range []float64{0, 0.2, 0.35, 0.5, 0.7} {
			steps := []sim.Step{{Kind: sim.StepHold, Duration: time.Hour}, {Kind: sim.StepDrain, ToHeadM: 0.8 * sh.h0M}}
			if frac > 0 {
				steps = append(steps, sim.Step{Kind: sim.StepPumpedDrain, RateM3s: frac * k * math.Sqrt(sh.h0M),
					Duration: time.Duration(sh.fullS / 3 * float64(time.Second))})
			}
			steps = append(steps, sim.Step{Kind: sim.StepDrain, ToHeadM: 0.25 * sh.h0M}, sim.Step{Kind: sim.StepHold, Duration: time.Hour})
			s, _ := sim.SimulateSequence(sim.SequenceSpec{Tank: tk, KM25s: k, SampleEvery: 10 * time.Second, NoiseM: 0.002,
				StartHeadM: sh.h0M, From: time.Date(2031, 4, 1, 0, 0, 0, 0, time.UTC), Steps: steps}, rand.New(rand.NewPCG(uint64(100*frac), 9)))
			sg := model.NewSegmenter(&tk, model.SegmentOptions{Settle: -1})
			sg.Push(s.TimeNs, s.HeadM, nil)
			drains := 0
			for _, g := range sg.FlushFinal() {
				if g.Kind == model.Drain {
					drains++
				}
			}
			st := sg.Stats()
			if frac == 0 && (drains != 1 || st.RejectedInflow != 0) {
				t.Errorf("%s without a feed: %d drains, %d rejected for inflow; want 1 and 0", sh.name, drains, st.RejectedInflow)
			}
			if frac > 0 && (drains != 0 || st.RejectedInflow != 1) {
				t.Errorf("%s with a feed of %.0f %% part of the way: %d drains, %d rejected for inflow; want 0 and 1", sh.name, 100*frac, drains, st.RejectedInflow)
			}
		}
	}
}
