package model_test

import (
	"flag"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"
	"time"

	"drainsight/model"
	"drainsight/model/sim"
)

var boundaryTable = flag.Bool("boundary-table", false, "print the measured boundary table (DEVELOPERS.md)")

// boundaryShape is one tank of the boundary study: full drain time fullS
// from head h0M sets K.
type boundaryShape struct {
	name  string
	tank  model.Tank
	h0M   float64
	fullS float64
}

func boundaryShapes(t testing.TB) []boundaryShape {
	t.Helper()
	st, err := model.NewStrappingTable([]float64{0, 0.4, 1.0, 1.8, 2.5}, []float64{0, 0.3, 1.5, 4.0, 6.5})
	if err != nil {
		t.Fatal(err)
	}
	return []boundaryShape{
		{"vertical", model.Tank{Shape: model.VerticalCylinder{DiameterM: 1.6, InternalHeightM: 2.4}}, 2.2, 1800},
		{"rectangular", model.Tank{Shape: model.Rectangular{LengthM: 2, WidthM: 1.5, InternalHeightM: 2}, OutletElevM: 0.1}, 1.8, 2400},
		{"horizontal", model.Tank{Shape: model.HorizontalCylinder{DiameterM: 2, LengthM: 4}}, 1.95, 2700},
		{"sphere", model.Tank{Shape: model.Sphere{DiameterM: 2.5}}, 2.4, 2400},
		// the cone is as tall as the cylinder is wide, outlet at the apex
		{"cone_apex", model.Tank{Shape: model.ConeBottomCylinder{DiameterM: 2, ConeHeightM: 2, CylinderHeightM: 2.5}}, 4.3, 2100},
		{"strapping", model.Tank{Shape: st}, 2.4, 2400},
	}
}

// boundaryCase is one simulated history: a tank, a sensor, and whether
// the outlet datum is known (unknown: the reading carries an offset the
// configuration does not know about).
type boundaryCase struct {
	shape   boundaryShape
	dt      time.Duration
	noiseM  float64
	quantM  float64
	offsetM float64 // datum error, m; the tank's DatumKnown is false when non-zero
}

// holds are the times the tank stands full before each drain.
var boundaryHolds = []time.Duration{1 * time.Minute, 2 * time.Minute, 5 * time.Minute, 15 * time.Minute,
	30 * time.Minute, 60 * time.Minute, 120 * time.Minute}

// simulate builds one history: for every hold, a full and a partial drain,
// each after the hold, with a pause and a fill after it.
func (c boundaryCase) simulate(seed uint64) (model.Tank, model.Series, []sim.DrainTruth) {
	rng := rand.New(rand.NewPCG(seed, 77))
	tk := c.shape.tank
	tk.ID = c.shape.name
	tk.DatumKnown = c.offsetM == 0
	ht, err := model.NewHeadTransform(&tk)
	if err != nil {
		panic(err)
	}
	h0 := c.shape.h0M
	k := ht.F(h0) / c.shape.fullS
	fillRate := (tk.Shape.VolumeM3(h0+tk.OutletElevM) - tk.Shape.VolumeM3(tk.OutletElevM)) / 2400
	var steps []sim.Step
	for _, hold := range boundaryHolds {
		for _, partial := range []bool{false, true} {
			to := 0.0
			if partial {
				to = h0 * (0.3 + 0.4*rng.Float64())
			}
			pause := time.Duration(5+rng.IntN(25)) * time.Minute
			steps = append(steps,
				sim.Step{Kind: sim.StepHold, Duration: hold + time.Duration(rng.IntN(30))*time.Second},
				sim.Step{Kind: sim.StepDrain, ToHeadM: to},
				sim.Step{Kind: sim.StepHold, Duration: pause},
				sim.Step{Kind: sim.StepFill, ToHeadM: h0, RateM3s: fillRate})
		}
	}
	steps = append(steps, sim.Step{Kind: sim.StepHold, Duration: 3 * time.Hour})
	s, tr := sim.SimulateSequence(sim.SequenceSpec{
		Tank: tk, KM25s: k, SampleEvery: c.dt, PhaseS: rng.Float64() * c.dt.Seconds(),
		NoiseM: c.noiseM, QuantumM: c.quantM, StartHeadM: h0,
		From: time.Date(2031, 6, 1, 0, 0, 0, 0, time.UTC), Steps: steps,
	}, rng)
	for i := range s.HeadM {
		s.HeadM[i] += c.offsetM
	}
	return tk, s, tr
}

// boundaryScore is what one case gave against the simulator's truth.
type boundaryScore struct {
	drains, found, extra int
	wrongComplete        int       // ran dry, or stopped by the valve, told wrongly
	startErr, endErr     []float64 // |segment boundary - truth| in samples
	kErr                 []float64 // |K/K_true - 1| of the fitted drains
	kOut                 int       // fitted K outside its 95 % interval
}

func scoreBoundaries(tk model.Tank, s model.Series, truth []sim.DrainTruth, dt time.Duration) (boundaryScore, []model.Segment) {
	segs := model.SegmentSeries(&tk, &s, model.SegmentOptions{Settle: -1})
	var dr []model.Segment
	for _, g := range segs {
		if g.Kind == model.Drain {
			dr = append(dr, g)
		}
	}
	sc := boundaryScore{drains: len(truth)}
	used := make([]bool, len(dr))
	for _, d := range truth {
		best, bestOv := -1, int64(0)
		for i, g := range dr {
			ov := min(g.RawEndNs, d.EndNs) - max(g.RawStartNs, d.StartNs)
			if ov > bestOv && !used[i] {
				best, bestOv = i, ov
			}
		}
		if best < 0 || bestOv < (d.EndNs-d.StartNs)/2 {
			continue
		}
		used[best] = true
		sc.found++
		g := dr[best]
		if g.Complete != d.Complete {
			sc.wrongComplete++
		}
		sc.startErr = append(sc.startErr, math.Abs(float64(g.RawStartNs-d.StartNs))/float64(dt))
		sc.endErr = append(sc.endErr, math.Abs(float64(g.RawEndNs-d.EndNs))/float64(dt))
		if f, err := model.FitDrain(&tk, &g, model.FitOptions{}); err == nil {
			sc.kErr = append(sc.kErr, math.Abs(f.KM25s/d.KM25s-1))
			if !(f.KLo95M25s <= d.KM25s && d.KM25s <= f.KHi95M25s) {
				sc.kOut++
			}
		}
	}
	for _, u := range used {
		if !u {
			sc.extra++
		}
	}
	return sc, dr
}

func (b *boundaryScore) add(o boundaryScore) {
	b.drains += o.drains
	b.found += o.found
	b.extra += o.extra
	b.wrongComplete += o.wrongComplete
	b.startErr = append(b.startErr, o.startErr...)
	b.endErr = append(b.endErr, o.endErr...)
	b.kErr = append(b.kErr, o.kErr...)
	b.kOut += o.kOut
}

func quantile(x []float64, q float64) float64 {
	if len(x) == 0 {
		return math.NaN()
	}
	y := slices.Clone(x)
	slices.Sort(y)
	return y[min(int(q*float64(len(y))), len(y)-1)]
}

func boundaryCases(t testing.TB) []boundaryCase {
	var cs []boundaryCase
	for _, sh := range boundaryShapes(t) {
		for _, sens := range []struct {
			dt           time.Duration
			noise, quant float64
			offset       float64
		}{
			{10 * time.Second, 0.002, 0, 0},
			{10 * time.Second, 0.002, 0, 0.03},
			{2 * time.Second, 0.0005, 0, 0},
			{30 * time.Second, 0.001, 0.001, 0},
		} {
			cs = append(cs, boundaryCase{sh, sens.dt, sens.noise, sens.quant, sens.offset})
		}
	}
	return cs
}

// TestSegmentBoundariesEveryShape: on every shape, full and partial
// drains after holds of 1-120 min are all found, with their start (valve
// opening) and end (valve closing, or the tank running dry) within 2
// samples of the simulator's own times. Targets from issue 9: recall
// >= 99 %, boundary error <= 2 samples. Run with -boundary-table -v for the
// DEVELOPERS.md table.
func TestSegmentBoundariesEveryShape(t *testing.T) {
	seeds := 2
	if testing.Short() {
		seeds = 1
	}
	byShape := map[string]*boundaryScore{}
	var total boundaryScore
	for ci, c := range boundaryCases(t) {
		for seed := range seeds {
			tk, s, truth := c.simulate(uint64(100*ci + seed))
			sc, dr := scoreBoundaries(tk, s, truth, c.dt)
			name := fmt.Sprintf("%s/%v/%.1fmm/offset%.0fmm/seed%d", c.shape.name, c.dt, 1000*c.noiseM, 1000*c.offsetM, seed)
			if sc.found < sc.drains || sc.extra > 0 || sc.wrongComplete > 0 || quantile(sc.startErr, 1) > 2 || quantile(sc.endErr, 1) > 2 {
				t.Errorf("%s: found %d of %d drains, %d extra, %d with Complete wrong; start error max %.1f samples, end error max %.1f samples",
					name, sc.found, sc.drains, sc.extra, sc.wrongComplete, quantile(sc.startErr, 1), quantile(sc.endErr, 1))
				if testing.Verbose() {
					logBoundaryMisses(t, dr, truth, c.dt)
				}
			}
			if byShape[c.shape.name] == nil {
				byShape[c.shape.name] = &boundaryScore{}
			}
			byShape[c.shape.name].add(sc)
			total.add(sc)
		}
	}
	// K through the segmenter: the boundaries cost no accuracy (median
	// error well under the 0.1 % a fit of 2 mm noise gives, model's
	// accuracy study) and the intervals hold (misses near 5 %; 10 % would
	// mean boundaries that bias K).
	if med, miss := quantile(total.kErr, 0.5), float64(total.kOut)/float64(len(total.kErr)); med > 0.001 || miss > 0.10 {
		t.Errorf("K of the drains found: median |error| %.3f %%, 95 %% intervals miss %.1f %%; want <= 0.1 %% and <= 10 %%", 100*med, 100*miss)
	}
	if recall := float64(total.found) / float64(total.drains); recall < 0.99 {
		t.Errorf("recall %.4f, want >= 0.99", recall)
	}
	if *boundaryTable {
		var b strings.Builder
		fmt.Fprintln(&b, "| shape | drains | found % | extra | start error p50 / p99 / max (samples) | end error p50 / p99 / max (samples) | |K error| p50 / p99 / max % | 95 % interval misses % |")
		fmt.Fprintln(&b, "|---|---|---|---|---|---|---|---|")
		row := func(name string, sc *boundaryScore) {
			fmt.Fprintf(&b, "| %s | %d | %.1f | %d | %.2f / %.2f / %.2f | %.2f / %.2f / %.2f | %.3f / %.3f / %.3f | %.1f |\n", name, sc.drains,
				100*float64(sc.found)/float64(sc.drains), sc.extra,
				quantile(sc.startErr, 0.5), quantile(sc.startErr, 0.99), quantile(sc.startErr, 1),
				quantile(sc.endErr, 0.5), quantile(sc.endErr, 0.99), quantile(sc.endErr, 1),
				100*quantile(sc.kErr, 0.5), 100*quantile(sc.kErr, 0.99), 100*quantile(sc.kErr, 1),
				100*float64(sc.kOut)/float64(len(sc.kErr)))
		}
		for _, sh := range boundaryShapes(t) {
			row(sh.name, byShape[sh.name])
		}
		row("all", &total)
		t.Log("\n" + b.String())
	}
}

func logBoundaryMisses(t *testing.T, dr []model.Segment, truth []sim.DrainTruth, dt time.Duration) {
	t0 := truth[0].StartNs
	m := func(ns int64) float64 { return float64(ns-t0) / 1e9 }
	for i, d := range truth {
		t.Logf("  truth %2d: %8.1f .. %8.1f s  h %.3f -> %.3f", i, m(d.StartNs), m(d.EndNs), d.H0M, d.H1M)
	}
	for i, g := range dr {
		t.Logf("  seg   %2d: %8.1f .. %8.1f s  n=%d complete=%v", i, m(g.RawStartNs), m(g.RawEndNs), len(g.TimeNs), g.Complete)
	}
	_ = dt
}
