package detect

import (
	"encoding/json"
	"math"
	"reflect"
	"testing"
	"time"

	"drainsight/model"
)

// history feeds a simulated tank (2 drains a day on average, tau 2 %, fit
// error 0.5 %) into s until endDay, with mult and leak giving the true K
// multiplier and leak constant at time t; it returns the simulator.
func history(t *testing.T, s *State, opt Options, seed uint64, endDay float64, mult, leak func(int64) float64) *simTank {
	t.Helper()
	so := StudyOptions{}.withDefaults()
	st := newSimTank(seed, 7, 0)
	st.ratePerDay = 2
	end := studyStart + int64(endDay*nsPerDay)
	for st.tNs < end {
		idle, f := st.step(so, mult, leak)
		s.AddIdle(idle, opt)
		s.AddFit(f, opt)
	}
	return st
}

func one(int64) float64  { return 1 }
func zero(int64) float64 { return 0 }

func dayNs(d float64) int64 { return studyStart + int64(d*nsPerDay) }

func TestHealthyTankNoFinding(t *testing.T) {
	s := NewState("t1")
	st := history(t, s, Options{}, 3, 120, one, zero)
	if fs := s.Evaluate(nsTime(st.tNs), Options{}); len(fs) != 0 {
		t.Errorf("healthy tank: %d findings, first %+v", len(fs), fs[0])
	}
	if !s.Ref.Set || math.Abs(s.Ref.KM25s/st.k0-1) > 0.02 {
		t.Errorf("reference K %.4g, want within 2 %% of %.4g", s.Ref.KM25s, st.k0)
	}
	if math.Abs(s.Ref.Tau-0.02) > 0.006 {
		t.Errorf("tau = %.4f, want 0.02 ± 0.006", s.Ref.Tau)
	}
}

func TestAbruptRestriction(t *testing.T) {
	onset := dayNs(60)
	mult := func(ts int64) float64 {
		if ts >= onset {
			return 0.7
		}
		return 1
	}
	s := NewState("t2")
	st := history(t, s, Options{}, 4, 70, mult, zero)
	fs := s.Evaluate(nsTime(st.tNs), Options{})
	if len(fs) != 1 {
		t.Fatalf("got %d findings, want 1: %+v", len(fs), fs)
	}
	f := fs[0]
	if f.Kind != KindRestriction || f.Subtype != SubAbrupt {
		t.Errorf("kind %s/%s, want restriction/abrupt; evidence: %s", f.Kind, f.Subtype, f.Evidence)
	}
	if math.Abs(f.MagnitudePct-(-30)) > 3 {
		t.Errorf("magnitude %.1f %%, want -30 ± 3", f.MagnitudePct)
	}
	on := nsTime(onset)
	if f.OnsetLo.After(on.Add(24*time.Hour)) || f.OnsetHi.Before(on.Add(-24*time.Hour)) {
		t.Errorf("onset interval %v..%v does not cover %v", f.OnsetLo, f.OnsetHi, on)
	}
	if f.Forecast == nil || !f.Forecast.Reached {
		t.Errorf("forecast %+v, want Reached (K is below 80 %% of baseline)", f.Forecast)
	}
	if f.PValue > 1e-6 {
		t.Errorf("p = %g, want tiny", f.PValue)
	}
}

func TestGradualRestrictionForecast(t *testing.T) {
	onset := dayNs(60)
	// K falls 0.5 %/day from day 60: it reaches 80 % of baseline at day 100.
	mult := func(ts int64) float64 {
		if ts < onset {
			return 1
		}
		return 1 - 0.005*float64(ts-onset)/nsPerDay
	}
	s := NewState("t3")
	st := history(t, s, Options{}, 5, 88, mult, zero)
	fs := s.Evaluate(nsTime(st.tNs), Options{})
	if len(fs) != 1 {
		t.Fatalf("got %d findings, want 1: %+v", len(fs), fs)
	}
	f := fs[0]
	if f.Kind != KindRestriction || f.Subtype != SubGradual {
		t.Fatalf("kind %s/%s, want restriction/gradual; evidence: %s", f.Kind, f.Subtype, f.Evidence)
	}
	fc := f.Forecast
	want := nsTime(dayNs(100))
	if fc == nil || fc.Date.IsZero() {
		t.Fatalf("no forecast date: %+v", fc)
	}
	if d := fc.Date.Sub(want); d < -8*24*time.Hour || d > 8*24*time.Hour {
		t.Errorf("forecast %v, want %v ± 8 days", fc.Date, want)
	}
	if !(fc.DateLo.Before(fc.Date) || fc.DateLo.Equal(fc.Date)) || (!fc.DateHi.IsZero() && fc.DateHi.Before(fc.Date)) {
		t.Errorf("interval %v..%v does not bracket %v", fc.DateLo, fc.DateHi, fc.Date)
	}
	if !(fc.DrainTimeNowS > fc.DrainTimeBaselineS && fc.DrainTimeAtThresholdS > fc.DrainTimeBaselineS) {
		t.Errorf("drain times %+v, want now and threshold longer than baseline", fc)
	}
}

func TestLeakVersusExcessOutflow(t *testing.T) {
	onset := dayNs(60)
	up := func(ts int64) float64 {
		if ts >= onset {
			return 1.2
		}
		return 1
	}
	s := NewState("excess")
	st := history(t, s, Options{}, 6, 75, up, zero)
	fs := s.Evaluate(nsTime(st.tNs), Options{})
	if len(fs) != 1 || fs[0].Kind != KindExcessOutflow {
		t.Errorf("K up, idle flat: %+v, want one excess_outflow", fs)
	}
	s = NewState("leak")
	var k0 float64
	leak := func(ts int64) float64 {
		if ts >= onset {
			return 0.2 * k0
		}
		return 0
	}
	st = newSimTank(6, 7, 0) // same K0 as history's simulator
	k0 = st.k0
	st = history(t, s, Options{}, 6, 75, up, leak)
	fs = s.Evaluate(nsTime(st.tNs), Options{})
	if len(fs) != 1 || fs[0].Kind != KindTankLeak {
		t.Fatalf("K up and idle leak: %+v, want one tank_leak", fs)
	}
	if math.Abs(fs[0].MagnitudePct-20) > 3 {
		t.Errorf("leak magnitude %.1f %%, want 20 ± 3", fs[0].MagnitudePct)
	}
}

// A constant fall rate while shut, whatever the head, is a drifting sensor,
// not a leak (a leak's rate scales with sqrt(head)).
func TestIdleFallNotFollowingHeadIsDrift(t *testing.T) {
	s := NewState("drift")
	opt := Options{}
	for i := 0; i < 60; i++ {
		head := 0.3 + 2.7*float64(i%7)/6
		rate := -2e-6 // m/s, the same at every head
		se := 1e-8
		const area = 2.0
		s.AddIdle(model.IdleFit{EndNs: dayNs(float64(i)), N: 200, MeanHeadM: head, RateMs: rate, RateSEMs: se,
			LeakKM25s: -rate * area / math.Sqrt(head), LeakKSEM25s: se * area / math.Sqrt(head), NoiseM: 0.001}, opt)
	}
	fs := s.Evaluate(nsTime(dayNs(60)), opt)
	if len(fs) != 1 || fs[0].Kind != KindSensorFault || fs[0].Subtype != SubDrift {
		t.Errorf("got %+v, want one sensor_fault/drift", fs)
	}
}

func TestSensorChecksAndSuppression(t *testing.T) {
	opt := Options{}
	onset := dayNs(60)
	down := func(ts int64) float64 {
		if ts >= onset {
			return 0.7
		}
		return 1
	}
	s := NewState("sensor")
	st := history(t, s, opt, 8, 70, down, zero)
	// The empty tank now reads 5 cm: drift. It must hide the restriction.
	for i := 1; i <= 6; i++ {
		s.AddFit(model.Fit{StartNs: st.tNs + int64(i)*3600e9, EndNs: st.tNs + int64(i)*3600e9 + 1e9, N: 300, KM25s: st.k0 * 0.7,
			KSEM25s: st.k0 * 0.0035, Quality: model.QualityA, SigmaM: 0.001, Complete: true, EmptyHeadM: 0.05}, opt)
	}
	now := nsTime(st.tNs + 7*3600e9)
	fs := s.Evaluate(now, opt)
	if len(fs) != 1 || fs[0].Kind != KindSensorFault || fs[0].Subtype != SubDrift {
		t.Fatalf("got %+v, want only sensor_fault/drift", fs)
	}

	// Raw samples: a gap is the feed's status, never a finding; the stuck
	// run after it is still found.
	f := NewState("feed")
	ser := &model.Series{}
	t0 := dayNs(0)
	for i := 0; i < 100; i++ {
		ser.Append(t0+int64(i)*60e9, 1+0.001*float64(i%3))
	}
	ser.Append(t0+int64(100)*60e9+int64(4*time.Hour), 1.0) // a 4 h gap
	for i := 1; i <= 15*60; i++ {                          // then 15 h of identical readings
		ser.Append(t0+int64(100)*60e9+int64(4*time.Hour)+int64(i)*60e9, 1.0)
	}
	f.AddSeries(ser, opt)
	f.AddSeries(ser, opt) // a repeat changes nothing
	last := ser.TimeNs[len(ser.TimeNs)-1]
	if len(f.Sensor.Gaps) != 1 {
		t.Errorf("gaps = %d, want 1", len(f.Sensor.Gaps))
	}
	fs = f.Evaluate(nsTime(last+int64(time.Minute)), opt)
	if len(fs) != 1 || fs[0].Subtype != SubStuck {
		t.Fatalf("1 min after the last sample: %+v, want only sensor_fault/stuck", fs)
	}
	// The flat run starts after the gap: it never spans the stretch
	// without samples.
	if want := nsTime(t0 + int64(100)*60e9 + int64(4*time.Hour)); !fs[0].Onset.Equal(want) {
		t.Errorf("stuck onset %v, want the first sample after the gap %v", fs[0].Onset, want)
	}
	for _, c := range []struct {
		after time.Duration
		state FeedState
	}{{time.Minute, FeedOK}, {time.Hour, FeedGap}, {7 * time.Hour, FeedSilent}} {
		now := nsTime(last + int64(c.after))
		fd := f.Feed(now, opt)
		if fd.State != c.state {
			t.Errorf("%v after the last sample: feed %s, want %s", c.after, fd.State, c.state)
		}
		if got := f.Evaluate(now, opt); c.state != FeedOK && got != nil {
			t.Errorf("%v after the last sample (feed %s): findings %+v, want withheld (nil)", c.after, fd.State, got)
		}
	}
}

func TestNoiseAndSpikes(t *testing.T) {
	opt := Options{}
	s := NewState("noisy")
	for i := 0; i < 20; i++ {
		noise, spikes := 0.001, 0
		if i >= 14 {
			noise, spikes = 0.004, 12
		}
		s.AddIdle(model.IdleFit{EndNs: dayNs(float64(i)), N: 300, NoiseM: noise, Spikes: spikes, FlatRun: 2}, opt)
	}
	got := map[string]bool{}
	for _, f := range s.Evaluate(nsTime(dayNs(20)), opt) {
		got[f.Subtype] = true
	}
	if !got[SubNoise] || !got[SubSpikes] {
		t.Errorf("subtypes %v, want noise and spikes", got)
	}
}

func TestStateJSONContinues(t *testing.T) {
	opt := Options{}
	a := NewState("json")
	st := history(t, a, opt, 9, 40, one, zero)
	raw, err := json.Marshal(a)
	if err != nil {
		t.Fatal(err)
	}
	var b State
	if err := json.Unmarshal(raw, &b); err != nil {
		t.Fatal(err)
	}
	// Same further drains into both: identical statistics.
	for i := 1; i <= 20; i++ {
		f := model.Fit{StartNs: st.tNs + int64(i)*3600e9, EndNs: st.tNs + int64(i)*3600e9 + 1e9, KM25s: st.k0 * (1 + 0.01*float64(i%3-1)),
			KSEM25s: st.k0 * 0.005, Quality: model.QualityA, N: 300}
		a.AddFit(f, opt)
		b.AddFit(f, opt)
		b.AddFit(f, opt) // a repeated fit is ignored
	}
	if a.CUSUM != b.CUSUM || a.EWMA != b.EWMA || a.Monitored != b.Monitored || !reflect.DeepEqual(a.Ref, b.Ref) {
		t.Errorf("after reload: %+v %+v vs %+v %+v", a.CUSUM, a.Ref, b.CUSUM, b.Ref)
	}
}

func TestReset(t *testing.T) {
	opt := Options{}
	s := NewState("reset")
	st := history(t, s, opt, 10, 30, one, zero)
	at := nsTime(st.tNs + 1)
	if err := s.Reset(at, "cleaned"); err != nil {
		t.Fatal(err)
	}
	if s.Ref.Set || s.Monitored != 0 || len(s.Points) != 0 {
		t.Errorf("after cleaning the baseline is not restarted: %+v", s.Ref)
	}
	s.AddFit(model.Fit{EndNs: st.tNs, KM25s: 1e-3, KSEM25s: 1e-6, Quality: model.QualityA}, opt)
	if len(s.Learn) != 0 {
		t.Errorf("a drain from before the cleaning was used")
	}
	if err := s.Reset(at, "painted"); err == nil {
		t.Errorf("unknown action accepted")
	}
}

func TestRankFleet(t *testing.T) {
	opt := Options{}
	var states []*State
	for i, m := range []float64{1, 1, 0.75, 1} {
		s := NewState(string(rune('a' + i)))
		onset := dayNs(60)
		mult := func(ts int64) float64 {
			if ts >= onset {
				return m
			}
			return 1
		}
		history(t, s, opt, uint64(20+i), 70, mult, zero)
		states = append(states, s)
	}
	r := RankFleet(states, nsTime(dayNs(70)), opt, 0.05)
	if r[0].Tank != "c" || !r[0].Watch {
		t.Errorf("first %+v, want tank c on the watch list", r[0])
	}
	for _, x := range r[1:] {
		if x.Watch {
			t.Errorf("healthy tank %s on the watch list (p %.3g, q %.3g)", x.Tank, x.PValue, x.QValue)
		}
	}
}

// TestGradualShiftLevelledOffSize: K rises +30 % over 30 days (a valve seat
// wearing) and then stays; 30 days later the finding gives the size where
// K stands, not the trend extrapolated past the plateau (before: +47 % on
// the demo's eroding valve). Tolerance: the between-drain scatter of 2 %
// over the 8 newest drains, about ±1.5 % with margin.
func TestGradualShiftLevelledOffSize(t *testing.T) {
	onset, top := dayNs(60), dayNs(90)
	mult := func(ts int64) float64 {
		switch {
		case ts < onset:
			return 1
		case ts < top:
			return 1 + 0.3*float64(ts-onset)/float64(top-onset)
		}
		return 1.3
	}
	s := NewState("t9")
	st := history(t, s, Options{}, 9, 120, mult, zero)
	fs := s.Evaluate(nsTime(st.tNs), Options{})
	if len(fs) != 1 || fs[0].Kind != KindExcessOutflow {
		t.Fatalf("findings %+v, want one excess outflow", fs)
	}
	if m := fs[0].MagnitudePct; math.Abs(m-30) > 1.5 {
		t.Errorf("magnitude %.1f %%, want 30 ± 1.5 %%; evidence: %s", m, fs[0].Evidence)
	}
}
