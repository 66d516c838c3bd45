package model

import (
	"math"
	"math/rand/v2"
	"testing"
)

// The plan's precision holds on the simulator: 300 drains simulated to the
// chosen plan (white noise, datum fitted as planned) scatter with a
// relative SD within 15 % of the planned SE (the Cramér-Rao bound, which
// the fit reaches on white noise, DEVELOPERS.md), and their 95 % intervals
// cover 92-98 % (binomial scatter of 300 drains about 95 %).
func TestPlanDrainTestHoldsOnTheSimulator(t *testing.T) {
	tank := &Tank{ID: "P1", Shape: VerticalCylinder{DiameterM: 2, InternalHeightM: 3}, OutletElevM: 0.1, DatumKnown: false}
	const k = 0.003
	_, best, err := PlanDrainTest(tank, PlanOptions{KM25s: k, NoiseM: 0.003, SampleS: 10, Target: 0.003, MaxHeadM: 2.8})
	if err != nil {
		t.Fatal(err)
	}
	if best == nil {
		t.Fatal("no plan reaches 0.3 %")
	}
	ht, _ := NewHeadTransform(tank)
	rng := rand.New(rand.NewPCG(11, 12))
	var seg Segment
	var ks []float64
	covered := 0
	for range 300 {
		simulateDrain(&seg, ht, k, best.StartHeadM, best.SampleS, best.DurationS, 0.003, 0, rng)
		seg.Tank, seg.Kind, seg.EmptyHeadM = "P1", Drain, math.NaN()
		f, err := FitDrain(tank, &seg, FitOptions{})
		if err != nil {
			t.Fatal(err)
		}
		ks = append(ks, f.KM25s/k)
		if f.KLo95M25s <= k && k <= f.KHi95M25s {
			covered++
		}
	}
	var m, v float64
	for _, x := range ks {
		m += x
	}
	m /= float64(len(ks))
	for _, x := range ks {
		v += (x - m) * (x - m)
	}
	sd := math.Sqrt(v / float64(len(ks)-1))
	if r := sd / best.RelSEDatum; r < 0.85 || r > 1.15 {
		t.Errorf("plan from %.2f m to %.2f m: K scatters %.4f %%, planned %.4f %% (ratio %.2f)", best.StartHeadM, best.EndHeadM, 100*sd, 100*best.RelSEDatum, r)
	}
	if c := float64(covered) / 300; c < 0.92 || c > 0.98 {
		t.Errorf("intervals cover %.1f %%, want 92-98 %%", 100*c)
	}
	t.Logf("plan %.2f -> %.2f m, %.0f min, %d samples: planned %.3f %%, simulated %.3f %%, coverage %.1f %%",
		best.StartHeadM, best.EndHeadM, best.DurationS/60, best.Samples, 100*best.RelSEDatum, 100*sd, 100*float64(covered)/300)
}

// A target the transmitter cannot reach gives no plan; correlated noise
// widens every candidate by sqrt((1+ρ)/(1-ρ)).
func TestPlanDrainTestLimits(t *testing.T) {
	tank := &Tank{ID: "P2", Shape: VerticalCylinder{DiameterM: 1, InternalHeightM: 1}, DatumKnown: true}
	rows, best, err := PlanDrainTest(tank, PlanOptions{KM25s: 0.002, NoiseM: 0.01, SampleS: 60, Target: 0.0001, MaxHeadM: 0.9})
	if err != nil || best != nil || len(rows) == 0 {
		t.Errorf("unreachable target: best %v, %d rows, %v", best, len(rows), err)
	}
	rowsR, _, _ := PlanDrainTest(tank, PlanOptions{KM25s: 0.002, NoiseM: 0.01, SampleS: 60, Target: 0.0001, MaxHeadM: 0.9, Rho: 0.8})
	if len(rowsR) != len(rows) || math.Abs(rowsR[0].RelSE/rows[0].RelSE-3) > 1e-9 {
		t.Errorf("ρ 0.8 widens by %.4f, want sqrt(1.8/0.2) = 3", rowsR[0].RelSE/rows[0].RelSE)
	}
	if _, _, err := PlanDrainTest(tank, PlanOptions{KM25s: 0.002, NoiseM: 0.01, SampleS: 60, Target: 0.01, MaxHeadM: 0.9, Rho: 1}); err == nil {
		t.Error("ρ 1: no error")
	}
}
