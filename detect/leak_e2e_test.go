package detect

import (
	"flag"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"drainsight/model"
	"drainsight/model/sim"
)

var dumpLeak = flag.Bool("dumpleak", false, "log a day of segments and readings of the 80 mm/h leak below the outlet")

// TestLeakFallsThroughSegmenter measures (issue 9 item 4) what the real
// segmenter makes of a leaking tank's falls while the outlet is shut: a
// simulated vertical tank (2 m², filled to 3 m, outlet 0.4 m above the
// bottom, K = 1e-3 m^2.5/s, 2 drains a day, 30 % stopped half way, 10 s at
// 1 mm), healthy for 10 days and leaking 5 or 80 mm/h at top fill
// through an opening 0.5 m above or 0.3 m below the outlet for the
// next 10. It logs the falls not emitted as drains, the idle hours before
// and after the onset, and fails if a drain segment lies outside every
// true drain (a shut fall cut as a drain).
func TestLeakFallsThroughSegmenter(t *testing.T) {
	if testing.Short() {
		t.Skip("simulates 4 tanks for 20 days")
	}
	from := time.Date(2030, 1, 1, 0, 0, 0, 0, time.UTC)
	const areaM2, topM, kOut = 2.0, 3.0, 1e-3
	tk := model.Tank{ID: "e2e", Shape: model.VerticalCylinder{DiameterM: math.Sqrt(4 * areaM2 / math.Pi), InternalHeightM: 3.6}, OutletElevM: 0.4, DatumKnown: true}
	for _, z := range []float64{0.5, -0.3} {
		for _, mmh := range []float64{5, 80} {
			kl := mmh / 3.6e6 * areaM2 / math.Sqrt(topM-z)
			onset := from.Add(10 * 24 * time.Hour)
			spec := sim.TankSpec{Tank: tk, KM25s: kOut, SampleEvery: 10 * time.Second, NoiseM: 0.001, FillToM: topM,
				DrainsPerDay: 2, PartialDrainShare: 0.3, FillRateM3s: 2e-3,
				Faults: []sim.Fault{{Kind: sim.TankLeak, Start: onset, Magnitude: kl / kOut, ElevM: z}}}
			s, tr := sim.Simulate(spec, from, from.Add(20*24*time.Hour), rand.New(rand.NewPCG(3, uint64(mmh))))
			sg := model.NewSegmenter(&tk, model.SegmentOptions{})
			sg.Push(s.TimeNs, s.HeadM, nil)
			segs := append(sg.Take(), sg.Flush()...)
			falls := sg.TakeFalls()
			oc := map[string]int{}
			for _, f := range falls {
				oc[f.Outcome.String()]++
				if f.Outcome != model.FallDrain {
					real := false
					for _, d := range tr.Drains {
						if f.StartNs < d.EndNs && f.EndNs > d.StartNs {
							real = true
						}
					}
					dur := float64(f.EndNs-f.StartNs) / 3600e9
					t.Logf("  fall %s %s: %.2f h, drop %.3f m (%.1f mm/h), overlaps a true drain %v", f.Outcome, time.Unix(0, f.StartNs).UTC().Format("01-02 15:04"), dur, f.DropM, f.DropM/dur*1e3, real)
				}
			}
			idleN, idleH, idleB := 0, 0.0, 0.0
			var worst float64
			for _, g := range segs {
				if g.Kind == model.Idle {
					if g.TimeNs[0] >= onset.UnixNano() {
						idleN++
						idleH += float64(g.TimeNs[len(g.TimeNs)-1]-g.TimeNs[0]) / 3600e9
					} else {
						idleB += float64(g.TimeNs[len(g.TimeNs)-1]-g.TimeNs[0]) / 3600e9
					}
					continue
				}
				for _, d := range tr.Drains {
					if g.TimeNs[0] < d.EndNs && g.TimeNs[len(g.TimeNs)-1] > d.StartNs {
						worst = math.Max(worst, math.Abs(float64(g.TimeNs[0]-d.StartNs))/1e9)
						worst = math.Max(worst, math.Abs(float64(g.TimeNs[len(g.TimeNs)-1]-d.EndNs))/1e9)
					}
				}
			}
			t.Logf("falls %v, idle h before onset %.0f, idle segments after onset %d (%.0f h), worst boundary error %.0f s", oc, idleB, idleN, idleH, worst)
			// The leak's falls while shut are idle periods (the segmenter's
			// leak-rate tests), so the leak chart sees them: at least half
			// the idle time of the healthy days before the onset remains.
			if idleH < 0.5*idleB {
				t.Errorf("opening at %+.1f m, %.0f mm/h: %.0f idle hours after the onset, want at least half the %.0f before it", z, mmh, idleH, idleB)
			}
			if *dumpLeak && z == -0.3 && mmh == 80 {
				for _, g := range segs {
					if g.TimeNs[0] > onset.UnixNano() && g.TimeNs[0] < onset.UnixNano()+2*86400e9 {
						t.Logf("  seg %v %s - %s  %.3f -> %.3f complete %v", g.Kind, time.Unix(0, g.TimeNs[0]).UTC().Format("01-02 15:04"), time.Unix(0, g.TimeNs[len(g.TimeNs)-1]).UTC().Format("15:04"), g.HeadM[0], g.HeadM[len(g.HeadM)-1], g.Complete)
					}
				}
				for _, d := range tr.Drains {
					if d.StartNs > onset.UnixNano() && d.StartNs < onset.UnixNano()+2*86400e9 {
						t.Logf("  true drain %s - %s %.3f -> %.3f", time.Unix(0, d.StartNs).UTC().Format("01-02 15:04"), time.Unix(0, d.EndNs).UTC().Format("15:04"), d.H0M, d.H1M)
					}
				}
				for i := range s.TimeNs {
					if s.TimeNs[i] > onset.UnixNano() && s.TimeNs[i] < onset.UnixNano()+2*86400e9 && i%180 == 0 {
						t.Logf("   %s %.3f", time.Unix(0, s.TimeNs[i]).UTC().Format("01-02 15:04"), s.HeadM[i])
					}
				}
			}
			extra := 0
			for _, g := range segs {
				if g.Kind != model.Drain {
					continue
				}
				a, b := g.TimeNs[0], g.TimeNs[len(g.TimeNs)-1]
				real := false
				for _, d := range tr.Drains {
					if a < d.EndNs && b > d.StartNs {
						real = true
					}
				}
				if real {
					continue
				}
				extra++
				f, err := model.FitDrain(&tk, &g, model.FitOptions{})
				dur := float64(b-a) / 3600e9
				drop := g.HeadM[0] - g.HeadM[len(g.HeadM)-1]
				msg := fmt.Sprintf("z %+.1f %2.0f mm/h: fall %s %.2f h drop %.3f m from %.2f m, rate %.1f mm/h", z, mmh, time.Unix(0, a).UTC().Format("01-02 15:04"), dur, drop, g.HeadM[0], drop/dur*1e3)
				if err == nil {
					msg += fmt.Sprintf(", K %.3g (%.2f %% of outlet K, leak K %.2f %%), grade %s complete %v", f.KM25s, 100*f.KM25s/kOut, 100*kl/kOut, f.Quality, f.Complete)
				} else {
					msg += " fit: " + err.Error()
				}
				t.Log(msg)
			}
			t.Logf("z %+.1f %2.0f mm/h: %d drains true, %d drain segments not a true drain", z, mmh, len(tr.Drains), extra)
			if extra > 0 {
				t.Errorf("opening at %+.1f m, %.0f mm/h: %d shut falls cut as drains", z, mmh, extra)
			}
		}
	}
}

// TestLeakDriftEndToEnd runs a few simulated tanks through the real
// segmenter, fits and detector (day windows, evaluated every 6 h) and logs
// the first finding after the onset of a leak (20 or 80 mm/h at top fill,
// opening above or below the outlet) or a drift (±20 mm/day). It is a
// measurement for the record, run on request (go test ./detect -run
// LeakDriftEndToEnd -v -args -leak-e2e -e2e-seeds 2); it fails only when a
// drift is first reported as a tank leak.
// e2eSeeds is the number of tanks per case of TestLeakDriftEndToEnd (2 for
// the figures in DEVELOPERS.md: -args -e2e-seeds 2).
var (
	e2eSeedsFlag = flag.Int("e2e-seeds", 1, "tanks per case of TestLeakDriftEndToEnd")
	leakE2E      = flag.Bool("leak-e2e", false, "run TestLeakDriftEndToEnd (simulated tanks through the segmenter, fits and detector)")
)

func TestLeakDriftEndToEnd(t *testing.T) {
	e2eSeeds := uint64(*e2eSeedsFlag)
	if !*leakE2E {
		t.Skip("a measurement: run with -args -leak-e2e")
	}
	from := time.Date(2030, 1, 1, 0, 0, 0, 0, time.UTC)
	const areaM2, topM, kOut = 2.0, 3.0, 1e-3
	tk := model.Tank{ID: "e2e", Shape: model.VerticalCylinder{DiameterM: math.Sqrt(4 * areaM2 / math.Pi), InternalHeightM: 3.6}, OutletElevM: 0.4, DatumKnown: true}
	type tc struct {
		name  string
		fault sim.Fault
		drift bool
	}
	onset := from.Add(20 * 24 * time.Hour)
	leak := func(mmh, z float64) sim.Fault {
		kl := mmh / 3.6e6 * areaM2 / math.Sqrt(topM-z)
		return sim.Fault{Kind: sim.TankLeak, Start: onset, Magnitude: kl / kOut, ElevM: z}
	}
	var cases []tc
	for _, z := range []float64{0.5, -0.3} {
		for _, mmh := range []float64{20, 80} {
			cases = append(cases, tc{fmt.Sprintf("leak %.0f mm/h at %+.1f m", mmh, z), leak(mmh, z), false})
		}
	}
	for _, d := range []float64{-20, 20} {
		cases = append(cases, tc{fmt.Sprintf("drift %+.0f mm/day", d), sim.Fault{Kind: sim.SensorDrift, Start: onset, Magnitude: d * 1e-3}, true})
	}
	for ci, c := range cases {
		for seed := uint64(1); seed <= e2eSeeds; seed++ {
			spec := sim.TankSpec{Tank: tk, KM25s: kOut, SampleEvery: 10 * time.Second, NoiseM: 0.001, FillToM: topM,
				DrainsPerDay: 2, PartialDrainShare: 0.3, FillRateM3s: 2e-3, Faults: []sim.Fault{c.fault}}
			s, _ := sim.Simulate(spec, from, from.Add(40*24*time.Hour), rand.New(rand.NewPCG(seed, uint64(ci))))
			sg := model.NewSegmenter(&tk, model.SegmentOptions{})
			st := NewState("e2e")
			opt := Options{}
			const day = int64(24 * time.Hour)
			var first []Finding
			var firstAt time.Time
			falseN := 0
			for a := 0; a < s.Len() && first == nil; {
				e := a
				end := s.TimeNs[a] - s.TimeNs[a]%day + day
				for e < s.Len() && s.TimeNs[e] < end {
					e++
				}
				sg.Push(s.TimeNs[a:e], s.HeadM[a:e], nil)
				for _, g := range sg.Take() {
					switch g.Kind {
					case model.Drain:
						if f, err := model.FitDrain(&tk, &g, model.FitOptions{}); err == nil {
							st.AddFit(f, opt)
						}
					case model.Idle:
						if f, err := model.FitIdle(&tk, &g); err == nil {
							st.AddIdle(f, opt)
						}
					}
				}
				for q := 1; q <= 4 && first == nil; q++ {
					now := time.Unix(0, end-day+int64(q)*day/4).UTC()
					fs := st.Evaluate(now, opt)
					if len(fs) == 0 {
						continue
					}
					if now.Before(onset) {
						falseN++
						st.restartCharts()
						continue
					}
					first, firstAt = fs, now
				}
				a = e
			}
			if first == nil {
				t.Logf("%s seed %d: no finding in 20 days after the onset (%d before it)", c.name, seed, falseN)
				continue
			}
			f := first[0]
			t.Logf("%s seed %d: first finding after %.0f h: %s/%s (%d before the onset) %s", c.name, seed, firstAt.Sub(onset).Hours(), f.Kind, f.Subtype, falseN, f.Evidence)
			if c.drift && f.Kind == KindTankLeak {
				t.Errorf("%s seed %d: a drift first reported as a tank leak", c.name, seed)
			}
		}
	}
}
