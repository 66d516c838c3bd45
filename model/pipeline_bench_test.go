package model_test

import (
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"drainsight/model"
	"drainsight/model/sim"
)

// pipelineCase is one simulated history for BenchmarkSegmentAndFit.
type pipelineCase struct {
	name   string
	tank   model.Tank
	series model.Series
	segs   []model.Segment // what the segmenter cut, for the fit-only runs
	drains int             // samples inside drain segments
}

// pipelineHistory simulates 30 days of one tank: 2-6 drains a day (the
// schedule is jittered by the simulator), some stopped half way, fills and
// idle holds in between, 2 mm reading noise and 1 mm quantisation. The
// scenario is invented; the seed is fixed so every run sees the same data.
func pipelineHistory(tb testing.TB, shape string, every time.Duration) pipelineCase {
	tb.Helper()
	from := time.Date(2025, 3, 1, 0, 0, 0, 0, time.UTC)
	to := from.Add(30 * 24 * time.Hour)
	k := func(cd, d float64) float64 { return cd * math.Pi / 4 * d * d * model.Sqrt2g }
	var spec sim.TankSpec
	switch shape {
	case "cylinder":
		spec = sim.TankSpec{
			Tank:    model.Tank{ID: "bench-cyl", Shape: model.VerticalCylinder{DiameterM: 4, InternalHeightM: 4}, OutletElevM: 0.1, OutletDiamM: 0.1, DatumKnown: true},
			KM25s:   k(0.61, 0.1),
			FillToM: 3.4, DrainsPerDay: 5, FillRateM3s: 0.03, PartialDrainShare: 0.15,
		}
	case "sphere":
		spec = sim.TankSpec{
			Tank:    model.Tank{ID: "bench-sph", Shape: model.Sphere{DiameterM: 3.2}, OutletElevM: 0.05, OutletDiamM: 0.08, DatumKnown: true},
			KM25s:   k(0.6, 0.08),
			FillToM: 2.8, DrainsPerDay: 3, FillRateM3s: 0.01, PartialDrainShare: 0.15,
		}
	default:
		tb.Fatalf("unknown shape %q", shape)
	}
	spec.SampleEvery, spec.NoiseM, spec.QuantumM = every, 0.002, 0.001
	spec.ValveOpenTime = 8 * time.Second
	s, _ := sim.Simulate(spec, from, to, rand.New(rand.NewPCG(7, uint64(every))))
	c := pipelineCase{name: shape + "/" + every.String(), tank: spec.Tank, series: s}
	c.segs = segmentDays(&c.tank, &s)
	for i := range c.segs {
		if c.segs[i].Kind == model.Drain {
			c.drains += len(c.segs[i].HeadM)
		}
	}
	return c
}

// segmentDays pushes s through a Segmenter in day windows, as a scan of the
// database does, and returns every segment.
func segmentDays(t *model.Tank, s *model.Series) []model.Segment {
	sg := model.NewSegmenter(t, model.SegmentOptions{})
	var out []model.Segment
	const day = int64(24 * time.Hour)
	for a := 0; a < s.Len(); {
		e := a
		end := s.TimeNs[a] - s.TimeNs[a]%day + day
		for e < s.Len() && s.TimeNs[e] < end {
			e++
		}
		sg.Push(s.TimeNs[a:e], s.HeadM[a:e], nil)
		out = append(out, sg.Take()...)
		a = e
	}
	return append(out, sg.Flush()...)
}

// fitAll fits every drain and idle segment and returns how many fits failed.
func fitAll(t *model.Tank, segs []model.Segment) int {
	bad := 0
	for i := range segs {
		g := &segs[i]
		var err error
		switch g.Kind {
		case model.Drain:
			_, err = model.FitDrain(t, g, model.FitOptions{})
		case model.Idle:
			_, err = model.FitIdle(t, g)
		}
		if err != nil {
			bad++
		}
	}
	return bad
}

// BenchmarkSegmentAndFit runs the whole per-tank model path over 30 days of
// history: segmentation in day windows, then FitDrain on every drain and
// FitIdle on every idle period. samples/s counts samples of history (not
// only those inside drains), so the "all" figure is the rate at which a
// history can be processed; run with -cpu 1 for one core. cpu-samples/s
// divides by the CPU time of the process instead of the wall time.
//
//	segment: NewSegmenter/Push/Take/Flush only
//	fit:     FitDrain/FitIdle on the segments cut beforehand
//	all:     both, as a scan does
func BenchmarkSegmentAndFit(b *testing.B) {
	for _, shape := range []string{"cylinder", "sphere"} {
		for _, every := range []time.Duration{10 * time.Second, time.Second} {
			var c pipelineCase
			loaded := false
			load := func(b *testing.B) {
				if !loaded {
					c, loaded = pipelineHistory(b, shape, every), true
				}
			}
			name := shape + "/" + every.String()
			b.Run(name+"/segment", func(b *testing.B) {
				load(b)
				cpu := processCPU()
				for b.Loop() {
					segmentDays(&c.tank, &c.series)
				}
				reportRate(b, c.series.Len(), processCPU()-cpu)
			})
			b.Run(name+"/fit", func(b *testing.B) {
				load(b)
				b.ReportAllocs()
				cpu := processCPU()
				for b.Loop() {
					if bad := fitAll(&c.tank, c.segs); bad > 0 {
						b.Fatalf("%d fits failed", bad)
					}
				}
				reportRate(b, c.series.Len(), processCPU()-cpu)
				b.ReportMetric(float64(c.drains)*float64(b.N)/b.Elapsed().Seconds(), "drain-samples/s")
			})
			b.Run(name+"/all", func(b *testing.B) {
				load(b)
				cpu := processCPU()
				for b.Loop() {
					if bad := fitAll(&c.tank, segmentDays(&c.tank, &c.series)); bad > 0 {
						b.Fatalf("%d fits failed", bad)
					}
				}
				reportRate(b, c.series.Len(), processCPU()-cpu)
			})
		}
	}
}

// reportRate reports samples of history per second of wall time and, where
// the process CPU time is known, per second of CPU time (cpu-samples/s),
// which load from other processes on a shared machine does not lower.
func reportRate(b *testing.B, n int, cpu time.Duration) {
	b.ReportMetric(float64(n)*float64(b.N)/b.Elapsed().Seconds(), "samples/s")
	if cpu > 0 {
		b.ReportMetric(float64(n)*float64(b.N)/cpu.Seconds(), "cpu-samples/s")
	}
}
