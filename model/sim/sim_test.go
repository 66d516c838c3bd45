package sim

import (
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"drainsight/model"
)

var t0 = time.Date(2031, 5, 1, 0, 0, 0, 0, time.UTC)

// oneDrain simulates one full drain of tank from h0 with K = Cd a sqrt(2g),
// a = 1e-3 m^2, Cd = 0.6, no noise, and returns the truth.
func oneDrain(t *testing.T, tk model.Tank, h0 float64, sample time.Duration) (model.Series, Truth) {
	t.Helper()
	spec := TankSpec{
		Tank: tk, KM25s: 0.6 * 1e-3 * model.Sqrt2g, SampleEvery: sample,
		FillToM: h0, DrainsPerDay: 1, FillRateM3s: 1e-3,
	}
	s, tr := Simulate(spec, t0, t0.Add(24*time.Hour), rand.New(rand.NewPCG(1, 1)))
	if len(tr.Drains) == 0 {
		t.Fatalf("no drain simulated")
	}
	return s, tr
}

// TestDrainTimeClosedForm checks the time to drain from h0 to the outlet
// against the closed forms in REFERENCES §3d (values tagged C: derived, and
// cross-checked there by an independent 400,000-step quadrature).
func TestDrainTimeClosedForm(t *testing.T) {
	cases := []struct {
		name string
		tank model.Tank
		h0   float64
		want float64 // s
	}{
		// A = 1 m^2, a = 1e-3, Cd = 0.6, h0 = 2 m: 1064.4332 s (REFERENCES §3d, C)
		{"cylinder", model.Tank{ID: "c", Shape: model.VerticalCylinder{DiameterM: math.Sqrt(4 / math.Pi), InternalHeightM: 3}}, 2, 1064.4332},
		// sphere R = 1 m full: 1783.4749 s; half full: 1103.4688 s (REFERENCES §3d, C)
		{"sphere_full", model.Tank{ID: "s", Shape: model.Sphere{DiameterM: 2}}, 2, 1783.4749},
		{"sphere_half", model.Tank{ID: "s", Shape: model.Sphere{DiameterM: 2}}, 1, 1103.4688},
		// cone, top radius 1 m, height 2 m, outlet at the apex: 668.8031 s (REFERENCES §3d, C)
		{"cone", model.Tank{ID: "k", Shape: model.ConeBottomCylinder{DiameterM: 2, ConeHeightM: 2, CylinderHeightM: 0.5}}, 2, 668.8031},
		// horizontal cylinder R = 1 m, L = 2 m: full 2838.4885 s, half 1834.9313 s (REFERENCES §3d, C)
		{"hcyl_full", model.Tank{ID: "h", Shape: model.HorizontalCylinder{DiameterM: 2, LengthM: 2}}, 2, 2838.4885},
		{"hcyl_half", model.Tank{ID: "h", Shape: model.HorizontalCylinder{DiameterM: 2, LengthM: 2}}, 1, 1834.9313},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, tr := oneDrain(t, c.tank, c.h0, 10*time.Second)
			d := tr.Drains[0]
			got := float64(d.EndNs-d.StartNs) * 1e-9
			if math.Abs(got-c.want) > 2e-3 {
				t.Errorf("drain time: got %.4f s, want %.4f s", got, c.want)
			}
			if !d.Complete || d.H1M != 0 || d.H0M != c.h0 {
				t.Errorf("truth: got %+v", d)
			}
		})
	}
}

// TestDrainCurveCylinder compares every sample of a noiseless cylinder drain
// with Torricelli's closed form sqrt(h(t)) = sqrt(h0) - K t / (2 A).
func TestDrainCurveCylinder(t *testing.T) {
	tk := model.Tank{ID: "c", Shape: model.VerticalCylinder{DiameterM: math.Sqrt(4 / math.Pi), InternalHeightM: 3}}
	s, tr := oneDrain(t, tk, 2, time.Second)
	d := tr.Drains[0]
	k := 0.6 * 1e-3 * model.Sqrt2g
	worst, n := 0.0, 0
	for i, tn := range s.TimeNs {
		if tn < d.StartNs || tn > d.EndNs {
			continue
		}
		ts := float64(tn-d.StartNs) * 1e-9
		r := math.Sqrt(2) - k*ts/2
		want := r * r
		worst = max(worst, math.Abs(s.HeadM[i]-want))
		n++
	}
	if n < 1000 {
		t.Fatalf("only %d samples in the drain", n)
	}
	if worst > 1e-9 {
		t.Errorf("worst head error: got %.3g m, want ≤ 1e-9 m", worst)
	}
	// the head never goes below the outlet
	for i, h := range s.HeadM {
		if h < 0 {
			t.Fatalf("negative head %.3g at sample %d", h, i)
		}
	}
}

// TestInflowDrainRK checks the RK4 path on A dh/dt = q - K sqrt(h) with
// constant q against its implicit solution: with u = sqrt(h) and
// u_e = q/K, t = (2A/K) [(u0 - u) + u_e ln((u0 - u_e)/(u - u_e))]
// (derived by separation of variables).
func TestInflowDrainRK(t *testing.T) {
	tk := model.Tank{ID: "c", Shape: model.VerticalCylinder{DiameterM: math.Sqrt(4 / math.Pi), InternalHeightM: 3}}
	k := 0.6 * 1e-3 * model.Sqrt2g
	q := 0.4 * k * math.Sqrt(2)
	spec := TankSpec{Tank: tk, KM25s: k}
	p := &plant{spec: &spec, g: newGeom(&spec.Tank), from: t0, endS: 1e9, h: 2, phase: pDrain,
		qA: -1, qB: math.Inf(1), qIn: q, valveEnd: -1, dStart: -1}
	ue, u0 := q/k, math.Sqrt(2)
	for _, ts := range []float64{100, 500, 1500, 4000} {
		p.runRK(ts, -1, true)
		// t(u) is decreasing in u: solve t(u) = ts by bisection on (ue, u0)
		lo, hi := ue, u0
		for range 200 {
			m := 0.5 * (lo + hi)
			tm := 2 / k * ((u0 - m) + ue*math.Log((u0-ue)/(m-ue)))
			if tm > ts {
				lo = m
			} else {
				hi = m
			}
		}
		want := lo * lo
		if math.Abs(p.h-want) > 1e-8 {
			t.Errorf("h(%.0f s): got %.10f m, want %.10f m", ts, p.h, want)
		}
	}
}

func TestSimulateDeterministic(t *testing.T) {
	spec := DemoPlant(t0, 3)[3]
	a, ta := Simulate(spec, t0, t0.Add(72*time.Hour), rand.New(rand.NewPCG(5, 6)))
	b, tb := Simulate(spec, t0, t0.Add(72*time.Hour), rand.New(rand.NewPCG(5, 6)))
	c, _ := Simulate(spec, t0, t0.Add(72*time.Hour), rand.New(rand.NewPCG(5, 7)))
	if a.Len() != b.Len() || len(ta.Drains) != len(tb.Drains) {
		t.Fatalf("same seed: %d vs %d samples, %d vs %d drains", a.Len(), b.Len(), len(ta.Drains), len(tb.Drains))
	}
	for i := range a.HeadM {
		if a.HeadM[i] != b.HeadM[i] || a.TimeNs[i] != b.TimeNs[i] {
			t.Fatalf("same seed differs at sample %d", i)
		}
	}
	for i := range ta.Drains {
		if ta.Drains[i] != tb.Drains[i] {
			t.Fatalf("same seed: drain %d differs", i)
		}
	}
	same := 0
	for i := range min(a.Len(), c.Len()) {
		if a.HeadM[i] == c.HeadM[i] {
			same++
		}
	}
	if same > a.Len()/2 {
		t.Errorf("another seed gives the same readings (%d of %d)", same, a.Len())
	}
}

func TestDemoPlantFaults(t *testing.T) {
	const days = 30
	specs := DemoPlant(t0, days)
	if got, want := len(specs), 8; got != want {
		t.Fatalf("tanks: got %d, want %d", got, want)
	}
	end := t0.Add(days * 24 * time.Hour)
	healthy := 0
	kinds := map[FaultKind]bool{}
	for i, spec := range specs {
		s, tr := Simulate(spec, t0, end, rand.New(rand.NewPCG(uint64(i), 42)))
		for _, f := range tr.Faults {
			kinds[f.Kind] = true
		}
		outletFault := false
		for _, f := range spec.Faults {
			switch f.Kind {
			case Fouling, Blockage, Erosion, DownstreamLeak, TankLeak, SensorDrift, SensorStuck:
				outletFault = true
			}
		}
		if !outletFault {
			healthy++
		}
		if s.Len() < 1000 || len(tr.Drains) < days {
			t.Errorf("%s: %d samples, %d drains", spec.Tank.ID, s.Len(), len(tr.Drains))
		}
		if dt := time.Duration(s.TimeNs[1] - s.TimeNs[0]); dt < 10*time.Second || dt > 60*time.Second {
			t.Errorf("%s: sampling %v", spec.Tank.ID, dt)
		}
		for _, f := range spec.Faults {
			switch f.Kind {
			case Fouling:
				if got, want := tr.KAt(end)/spec.KM25s, 1-f.Magnitude; math.Abs(got-want) > 1e-12 {
					t.Errorf("%s fouling: K ratio at end got %.4f, want %.4f", spec.Tank.ID, got, want)
				}
				if got := tr.KAt(f.Start.Add(-time.Hour)); got != spec.KM25s {
					t.Errorf("%s fouling: K before start got %g, want %g", spec.Tank.ID, got, spec.KM25s)
				}
			case Blockage:
				before, after := tr.KAt(f.Start.Add(-time.Minute)), tr.KAt(f.Start.Add(time.Minute))
				if math.Abs(after/before-(1-f.Magnitude)) > 1e-12 {
					t.Errorf("%s blockage: K ratio got %.4f, want %.4f", spec.Tank.ID, after/before, 1-f.Magnitude)
				}
				// drains after the blockage carry the lower K in the truth
				for _, d := range tr.Drains {
					if d.StartNs > f.Start.UnixNano() && math.Abs(d.KM25s-after) > 1e-12 {
						t.Errorf("%s: drain K %g after blockage, want %g", spec.Tank.ID, d.KM25s, after)
					}
				}
			case Erosion:
				if got, want := tr.KAt(end)/spec.KM25s, 1+f.Magnitude; math.Abs(got-want) > 1e-12 {
					t.Errorf("%s erosion: K ratio at end got %.4f, want %.4f", spec.Tank.ID, got, want)
				}
			case TankLeak:
				if tr.LeakKAt(f.Start) != 0 || tr.LeakKAt(end) <= 0 {
					t.Errorf("%s leak: K_leak %g at start, %g at end", spec.Tank.ID, tr.LeakKAt(f.Start), tr.LeakKAt(end))
				}
			case DataGap:
				for _, tn := range s.TimeNs {
					if tn >= f.Start.UnixNano() && tn < f.End.UnixNano() {
						t.Fatalf("%s: sample inside the data gap", spec.Tank.ID)
					}
				}
				if tr.GapSamples == 0 {
					t.Errorf("%s: no samples lost to the gap", spec.Tank.ID)
				}
			case SensorStuck:
				var v []float64
				for i, tn := range s.TimeNs {
					if tn >= f.Start.UnixNano() && tn < f.End.UnixNano() {
						v = append(v, s.HeadM[i])
					}
				}
				for _, x := range v {
					if x != v[0] {
						t.Fatalf("%s: reading moves while stuck", spec.Tank.ID)
					}
				}
				if len(v) < 100 {
					t.Errorf("%s: %d stuck samples", spec.Tank.ID, len(v))
				}
			case SensorSpikes:
				if tr.Spikes < days*10 {
					t.Errorf("%s: %d spikes in %d days", spec.Tank.ID, tr.Spikes, days)
				}
			}
		}
		if spec.MeterInflow && len(s.InflowM3s) != s.Len() {
			t.Errorf("%s: metered inflow has %d samples, want %d", spec.Tank.ID, len(s.InflowM3s), s.Len())
		}
	}
	for _, k := range []FaultKind{Fouling, Blockage, Erosion, TankLeak, SensorDrift, SensorStuck, DataGap, SensorSpikes} {
		if !kinds[k] {
			t.Errorf("demo plant lacks a %v fault", k)
		}
	}
	if healthy < 2 {
		t.Errorf("healthy tanks: got %d, want ≥ 2", healthy)
	}
}

// TestDemoSegmentation runs the segmenter on every demo tank: it must find
// most drains that ran without unmetered inflow, each close to the truth.
func TestDemoSegmentation(t *testing.T) {
	const days = 10
	specs := DemoPlant(t0, days)
	for i, spec := range specs {
		s, tr := Simulate(spec, t0, t0.Add(days*24*time.Hour), rand.New(rand.NewPCG(uint64(i), 7)))
		segs := model.SegmentSeries(&spec.Tank, &s, model.SegmentOptions{Settle: -1})
		var clean []DrainTruth
		for _, d := range tr.Drains {
			if d.InflowM3s == 0 || spec.MeterInflow {
				clean = append(clean, d)
			}
		}
		found := 0
		for _, d := range clean {
			for _, g := range segs {
				if g.Kind == model.Drain && math.Abs(float64(g.RawStartNs-d.StartNs)) < 3*float64(spec.SampleEvery)+60e9 {
					found++
					break
				}
			}
		}
		ndr := 0
		for _, g := range segs {
			if g.Kind == model.Drain {
				ndr++
			}
		}
		t.Logf("%s: %d true drains (%d clean), %d segmented, %d matched", spec.Tank.ID, len(tr.Drains), len(clean), ndr, found)
		if found < len(clean)*8/10 {
			t.Errorf("%s: found %d of %d clean drains", spec.Tank.ID, found, len(clean))
		}
		if ndr > len(tr.Drains) {
			t.Errorf("%s: %d drains segmented, only %d happened", spec.Tank.ID, ndr, len(tr.Drains))
		}
	}
}

// TestLeakOpeningElevation checks a shut tank leaking through an opening off
// the outlet against Torricelli's law for a vertical cylinder of area A:
// A dh/dt = -K_l sqrt(h - z) gives sqrt(h(t) - z) = sqrt(h0 - z) - K_l t/(2A)
// (closed form, computed), until the level reaches the opening z. Above the
// outlet (z = 0.5 m) the level stops at z; below it (z = -0.3 m, the vessel
// bottom 0.4 m below the outlet) it keeps falling below the outlet and the
// reading goes negative.
func TestLeakOpeningElevation(t *testing.T) {
	const areaM2, h0 = 2.0, 2.0
	tk := model.Tank{ID: "leak", Shape: model.VerticalCylinder{DiameterM: math.Sqrt(4 * areaM2 / math.Pi), InternalHeightM: 3.4}, OutletElevM: 0.4}
	const kOut = 1e-3
	for _, z := range []float64{0.5, -0.3} {
		kl := 0.04 * kOut
		spec := TankSpec{Tank: tk, KM25s: kOut, SampleEvery: time.Minute, FillToM: h0,
			Faults: []Fault{{Kind: TankLeak, Start: t0, Magnitude: kl / kOut, ElevM: z}}}
		s, _ := Simulate(spec, t0, t0.Add(72*time.Hour), rand.New(rand.NewPCG(1, 1)))
		tEmpty := 2 * areaM2 * math.Sqrt(h0-z) / kl // s, the level reaches z
		for i, tn := range s.TimeNs {
			ts := float64(tn-t0.UnixNano()) * 1e-9
			want := z
			if ts < tEmpty {
				r := math.Sqrt(h0-z) - kl*ts/(2*areaM2)
				want = z + r*r
			}
			if math.Abs(s.HeadM[i]-want) > 1e-6 {
				t.Fatalf("opening at %+.1f m: head %.7f m at %.0f s, want %.7f m (Torricelli)", z, s.HeadM[i], ts, want)
			}
		}
		last := s.HeadM[len(s.HeadM)-1]
		if z < 0 && !(last < 0) {
			t.Errorf("opening below the outlet: last head %.4f m, want below the outlet", last)
		}
	}
}
