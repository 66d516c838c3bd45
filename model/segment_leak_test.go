package model

import (
	"math"
	"math/rand/v2"
	"testing"
)

// A tank that leaks through its shell while shut: its falls at the leak's
// rate are idle periods, not drains, and a partial drain ends where the
// valve closed even though the level falls on. The levels follow
// Torricelli's law, A dh/dt = -(K_valve + K_leak) sqrt(h) (the leak's
// opening at the outlet's height for simplicity), integrated with 1 s
// Euler steps and sampled every 10 s with 1 mm white noise; the leak is
// 80 mm/h at 3 m, 2.4 % of the outlet's K.
func TestSegmenterLeakWhileShut(t *testing.T) {
	const areaM2, kOut, dtS = 2.0, 1e-3, 10.0
	kLeak := 0.08 / 3600 * areaM2 / math.Sqrt(3)
	tank := &Tank{ID: "lk", Shape: VerticalCylinder{DiameterM: math.Sqrt(4 * areaM2 / math.Pi), InternalHeightM: 3.6}, DatumKnown: true}
	type phase struct {
		durS  float64
		valve bool    // outlet open
		fillM float64 // fill to this level first (instantly ramped at 1 mm/s)
	}
	// hold-with-leak, partial drain, shut 3 h, drain to empty, refill,
	// leak 2 h, full drain, rest
	phases := []phase{{4 * 3600, false, 3}, {1200, true, 0}, {3 * 3600, false, 0}, {5400, true, 0},
		{2 * 3600, false, 3}, {7200, true, 0}, {3600, false, 0}}
	rng := rand.New(rand.NewPCG(7, 1))
	var ts []int64
	var hs []float64
	var opens, closes []float64
	h, tS := 0.5, 0.0
	sample := func() {
		if math.Mod(tS, dtS) == 0 {
			ts = append(ts, int64(tS*1e9))
			hs = append(hs, h+0.001*rng.NormFloat64())
		}
	}
	for _, p := range phases {
		for p.fillM > 0 && h < p.fillM {
			h += 0.001
			tS++
			sample()
		}
		if p.valve {
			opens = append(opens, tS)
		}
		end := tS + p.durS
		for tS < end {
			k := kLeak
			if p.valve {
				k += kOut
			}
			h = max(h-k*math.Sqrt(max(h, 0))/areaM2, 0)
			tS++
			sample()
		}
		if p.valve {
			closes = append(closes, tS)
		}
	}
	sg := NewSegmenter(tank, SegmentOptions{OutletKM25s: kOut})
	sg.Push(ts, hs, nil)
	segs := append(sg.Take(), sg.Flush()...)
	var drains []Segment
	idleS := 0.0
	for _, g := range segs {
		switch g.Kind {
		case Drain:
			drains = append(drains, g)
		case Idle:
			if float64(g.TimeNs[0])*1e-9 >= opens[0] {
				idleS += float64(g.TimeNs[len(g.TimeNs)-1]-g.TimeNs[0]) * 1e-9
			}
		}
	}
	if len(drains) != len(opens) {
		for _, f := range sg.TakeFalls() {
			t.Logf("fall %s %.0f-%.0f s drop %.3f", f.Outcome, float64(f.StartNs)*1e-9, float64(f.EndNs)*1e-9, f.DropM)
		}
		for _, g := range segs {
			t.Logf("seg %v %.0f-%.0f s", g.Kind, float64(g.TimeNs[0])*1e-9, float64(g.TimeNs[len(g.TimeNs)-1])*1e-9)
		}
		t.Logf("opens %v closes %v", opens, closes)
		for _, g := range drains {
			t.Logf("drain %.0f-%.0f s", float64(g.TimeNs[0])*1e-9, float64(g.TimeNs[len(g.TimeNs)-1])*1e-9)
		}
		t.Fatalf("%d drains, want %d (one per valve opening)", len(drains), len(opens))
	}
	for i, g := range drains {
		a, b := float64(g.TimeNs[0])*1e-9, float64(g.TimeNs[len(g.TimeNs)-1])*1e-9
		// the start within a Window's trigger (2 samples) of the opening,
		// the end before the valve closed (or the tank ran dry) plus 2
		// samples: never the leak's fall after it
		if a < opens[i]-2*dtS || a > opens[i]+3*dtS {
			t.Errorf("drain %d starts at %.0f s, valve opened at %.0f s", i, a, opens[i])
		}
		if b > closes[i]+2*dtS {
			t.Errorf("drain %d ends at %.0f s, valve closed at %.0f s: the leak's fall was joined to it", i, b, closes[i])
		}
		f, err := FitDrain(tank, &g, FitOptions{})
		if err != nil {
			t.Fatalf("drain %d: %v", i, err)
		}
		if want := kOut + kLeak; math.Abs(f.KM25s/want-1) > 0.01 {
			t.Errorf("drain %d: K %.4g, want %.4g (outlet and leak) ± 1 %%", i, f.KM25s, want)
		}
	}
	shut := 0.0
	for i, p := range phases {
		if !p.valve && i > 0 {
			shut += p.durS
		}
	}
	if idleS < 0.6*shut {
		t.Errorf("idle periods cover %.1f h of the %.1f h shut after the first drain, want at least 60 %%", idleS/3600, shut/3600)
	}
	t.Logf("%d drains, idle %.1f h of %.1f h shut", len(drains), idleS/3600, shut/3600)
}
