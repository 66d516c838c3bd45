package detect

import (
	"math"
	"testing"
	"time"

	"drainsight/model"
)

// Seeded cases per row of the leak-or-drift study: the first finding of a
// few tanks of every row has the right kind (tank_leak for a leak,
// sensor_fault/drift for a drift). The goal, >= 95 % per row, is the
// project's requirement (issue 9); here every one of 3 tanks must be right.
func TestLeakDriftFirstKindCases(t *testing.T) {
	rows := StudyLeakDrift(StudyOptions{Tanks: 3, Seed: 7, BaselineDays: 30})
	for _, r := range rows {
		if r.DetectedPct != 100 || r.RightKindPct != 100 {
			t.Errorf("%s %+g %s: detected %.0f %%, right kind at the first finding %.0f %%, want 100 %% of 3 seeded tanks", r.Fault, r.Size, r.Unit, r.DetectedPct, r.RightKindPct)
		}
	}
}

// leakDriftFirst builds a state with a baseline of complete drains (empty
// reading 0 ± 0.3 mm) and healthy idle periods, then adds falling idle
// periods at 3 m and 2.5 m (the fall rate at each given by rate; heads too
// close for the head to tell a leak from a drift) and complete drains whose
// empty reading is empty(t), evaluating after each, and returns the first
// findings raised.
func leakDriftFirst(rate func(headM float64) float64, empty func(sinceS float64) float64) []Finding {
	s := NewState("t")
	opt := Options{}
	t0 := time.Date(2030, 1, 1, 0, 0, 0, 0, time.UTC).UnixNano()
	const hourNs = int64(time.Hour)
	k := 1e-3
	at := t0
	addIdle := func(h, r float64) {
		se := 2e-9
		s.AddIdle(model.IdleFit{StartNs: at, EndNs: at + 4*hourNs, N: 480, MeanHeadM: h, RateMs: r, RateSEMs: se,
			LeakKM25s: -r * 2 / math.Sqrt(h), LeakKSEM25s: se * 2 / math.Sqrt(h), NoiseM: 0.001}, opt)
		at += 4 * hourNs
	}
	addDrain := func(e float64) {
		s.AddFit(model.Fit{StartNs: at, EndNs: at + 2*hourNs, N: 240, KM25s: k, KSEM25s: 0.005 * k, Quality: model.QualityA,
			SigmaM: 0.001, Complete: true, EmptyHeadM: e, H0M: 3, Exponent: 0.5}, opt)
		at += 2 * hourNs
	}
	for i := range 12 {
		addIdle(3, 0)
		addDrain(0.0003 * math.Sin(float64(i)))
		addIdle(2.5, 0)
	}
	onset := at
	first := func() []Finding { return s.Evaluate(time.Unix(0, at).UTC(), opt) }
	for range 8 {
		addIdle(3, rate(3))
		if fs := first(); len(fs) > 0 {
			return fs
		}
		addDrain(empty(float64(at-onset) / 1e9))
		if fs := first(); len(fs) > 0 {
			return fs
		}
		addIdle(2.5, rate(2.5))
		if fs := first(); len(fs) > 0 {
			return fs
		}
	}
	return nil
}

// A leak through an opening at the outlet (rate ∝ sqrt(h), 20 mm/h at 3 m)
// leaves the empty reading where it was: the first finding is tank_leak. A
// falling drift of 20 mm/day (the same rate at every head) moves the empty
// reading with it: the first finding is sensor_fault/drift, with no
// tank_leak beside it (before the empty reading was consulted, the leak
// chart reported this drift as a tank leak first).
func TestLeakOrDriftFromEmptyReading(t *testing.T) {
	leakRate := func(h float64) float64 { return -20e-3 / 3600 * math.Sqrt(h/3) }
	fs := leakDriftFirst(leakRate, func(float64) float64 { return 0 })
	if len(fs) == 0 || fs[0].Kind != KindTankLeak {
		t.Fatalf("leak: first findings %+v, want tank_leak", fs)
	}
	drift := -20e-3 / 86400
	fs = leakDriftFirst(func(float64) float64 { return drift }, func(since float64) float64 { return drift * since })
	if len(fs) == 0 || fs[0].Kind != KindSensorFault || fs[0].Subtype != SubDrift {
		t.Fatalf("drift: first findings %+v, want sensor_fault/drift", fs)
	}
	for _, f := range fs {
		if f.Kind != KindSensorFault {
			t.Errorf("drift: %s reported beside the drift", f.Kind)
		}
	}
}

// A drain fit whose K is a small fraction of the reference (a fall through
// a leak with the outlet shut, K = 2 % of the outlet's) never enters the
// outlet charts: no restriction, the monitored count unchanged, and it
// feeds the leak chart as an idle period.
func TestLeakOnlyFallStaysOutOfOutletCharts(t *testing.T) {
	s := NewState("t")
	opt := Options{}
	t0 := time.Date(2030, 1, 1, 0, 0, 0, 0, time.UTC).UnixNano()
	const hourNs = int64(time.Hour)
	k := 1e-3
	at := t0
	for i := range 12 {
		s.AddFit(model.Fit{StartNs: at, EndNs: at + 2*hourNs, N: 240, KM25s: k * (1 + 0.01*math.Sin(float64(i))), KSEM25s: 0.005 * k,
			Quality: model.QualityA, SigmaM: 0.001, Complete: true, EmptyHeadM: 0, H0M: 3, Exponent: 0.5}, opt)
		at += 12 * hourNs
	}
	mon, idle, recs := s.Monitored, len(s.Idle), len(s.Sensor.Recs)
	for range 5 {
		s.AddFit(model.Fit{StartNs: at, EndNs: at + 6*hourNs, N: 720, KM25s: 0.02 * k, KSEM25s: 0.0005 * k,
			Quality: model.QualityA, SigmaM: 0.001, Complete: true, EmptyHeadM: 0.5, H0M: 3, H1M: 2.5, Exponent: 0.5}, opt)
		at += 12 * hourNs
	}
	if s.Monitored != mon {
		t.Errorf("monitored drains %d -> %d, want the leak-only falls kept out", mon, s.Monitored)
	}
	if len(s.Sensor.Recs) != recs {
		t.Errorf("sensor records %d -> %d, want no empty reading from a leak-only fall", recs, len(s.Sensor.Recs))
	}
	if len(s.Idle) != idle+5 {
		t.Errorf("idle points %d -> %d, want the 5 falls on the leak chart", idle, len(s.Idle))
	}
	for _, f := range s.Evaluate(time.Unix(0, at).UTC(), opt) {
		if f.Kind == KindRestriction {
			t.Errorf("a leak-only fall raised a restriction: %s", f.Evidence)
		}
	}
}
