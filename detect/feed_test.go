package detect

import (
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"drainsight/model"
)

// feedTank is 10 h of samples every 60 s from t0, a 3 h stretch without
// samples after the last of them (at a), then 2 h more (the last at end).
func feedTank() (s *State, t0, a, end int64) {
	s = NewState("feed")
	t0 = dayNs(0)
	ser := &model.Series{}
	for i := range 600 {
		ser.Append(t0+int64(i)*60e9, 1+0.001*float64(i%7))
	}
	a = ser.TimeNs[ser.Len()-1]
	for i := range 120 {
		ser.Append(a+int64(3*time.Hour)+int64(i)*60e9, 1+0.001*float64(i%5))
	}
	end = ser.TimeNs[ser.Len()-1]
	s.AddSeries(ser, Options{})
	return s, t0, a, end
}

func TestFeedStatus(t *testing.T) {
	s, _, a, end := feedTank()
	h := func(d float64) int64 { return int64(d * float64(time.Hour)) }
	for _, tt := range []struct {
		name     string
		now      int64
		opt      Options
		state    FeedState
		last     int64 // 0: unknown
		silentS  float64
		missing  float64 // share of the 24 h before the horizon
		gaps     int
		withheld bool
	}{
		{"just after the last sample", end + 30e9, Options{}, FeedOK, end, 0, 3.0 / 24, 1, false},
		{"14 min: still ok (limit 15 min)", end + h(14.0/60), Options{}, FeedOK, end, 0, 3.0 / 24, 1, false},
		{"20 min: gap in progress", end + h(20.0/60), Options{}, FeedGap, end, 1200, (3 + 20.0/60) / 24, 2, true},
		{"3 h 59 min: gap, not yet silent", end + h(3+59.0/60), Options{}, FeedGap, end, (3*60 + 59) * 60, (6 + 59.0/60) / 24, 2, true},
		{"5 h: silent (default limit 4 h)", end + h(5), Options{}, FeedSilent, end, 5 * 3600, 8.0 / 24, 2, true},
		{"30 h: silent, the old gap out of the window", end + h(30), Options{}, FeedSilent, end, 30 * 3600, 1, 1, true},
		{"limit 1 h: silent at 70 min", end + h(70.0/60), Options{SilentLimit: time.Hour}, FeedSilent, end, 70 * 60, (3 + 70.0/60) / 24, 2, true},
		{"read lag 10 min: 20 min is 10 min old", end + h(20.0/60), Options{ReadLag: 10 * time.Minute}, FeedOK, end, 0, 3.0 / 24, 1, false},
		// A time inside the recorded gap (replaying history).
		{"inside the recorded gap, 1 h in", a + h(1), Options{}, FeedGap, a, 3600, 1.0 / 24, 1, true},
		{"inside the recorded gap, limit 2 h", a + h(2.5), Options{SilentLimit: 2 * time.Hour}, FeedSilent, a, 2.5 * 3600, 2.5 / 24, 1, true},
		{"before the gap", a - h(1), Options{}, FeedOK, 0, 0, 0, 0, false},
	} {
		t.Run(tt.name, func(t *testing.T) {
			got := s.Feed(nsTime(tt.now), tt.opt)
			if got.State != tt.state {
				t.Errorf("state %s, want %s", got.State, tt.state)
			}
			if tt.last == 0 && !got.LastSample.IsZero() || tt.last != 0 && !got.LastSample.Equal(nsTime(tt.last)) {
				t.Errorf("last sample %v, want %v", got.LastSample, nsTime(tt.last))
			}
			if math.Abs(got.SilentForS-tt.silentS) > 1e-6 {
				t.Errorf("silent for %g s, want %g", got.SilentForS, tt.silentS)
			}
			if (tt.silentS > 0) != !got.SilentSince.IsZero() {
				t.Errorf("silent since %v with silent for %g s", got.SilentSince, got.SilentForS)
			}
			if math.Abs(got.MissingShare24h-tt.missing) > 1e-9 {
				t.Errorf("missing share %.6f, want %.6f", got.MissingShare24h, tt.missing)
			}
			if got.GapsIn24h != tt.gaps {
				t.Errorf("gaps in 24 h %d, want %d", got.GapsIn24h, tt.gaps)
			}
			if got.Withholds() != tt.withheld {
				t.Errorf("withholds = %v, want %v", got.Withholds(), tt.withheld)
			}
			if ev := s.Evaluate(nsTime(tt.now), tt.opt); tt.withheld && ev != nil {
				t.Errorf("findings %+v while the feed is %s, want withheld (nil)", ev, got.State)
			}
		})
	}
	if got := NewState("none").Feed(nsTime(end), Options{}); got.State != FeedNoData || got.Withholds() {
		t.Errorf("no samples: %+v, want no_data, not withholding", got)
	}
	if got := s.GapsBetween(nsTime(a-int64(time.Hour)), nsTime(end)); len(got) != 1 || got[0].StartNs != a || got[0].EndNs != a+int64(3*time.Hour) {
		t.Errorf("GapsBetween = %+v, want the one 3 h gap", got)
	}
}

// TestWithheldFindingsKeepState: a tank with an active restriction keeps
// it through a silent stretch (Evaluate returns nil, the state is not
// touched) and reports it again when data come back.
func TestWithheldFindingsKeepState(t *testing.T) {
	opt := Options{}
	onset := dayNs(60)
	s := NewState("withheld")
	history(t, s, opt, 8, 90, func(ts int64) float64 {
		if ts >= onset {
			return 0.7
		}
		return 1
	}, zero)
	ser := &model.Series{}
	rng := rand.New(rand.NewPCG(5, 6))
	t0 := dayNs(90)
	readings(rng, ser, t0, 30*time.Second, 120, 1.5, 0.001, 0, -1, -1)
	s.AddSeries(ser, opt)
	last := ser.TimeNs[ser.Len()-1]
	before := s.Evaluate(nsTime(last+30e9), opt)
	if len(before) != 1 || before[0].Kind != KindRestriction {
		t.Fatalf("before the silence: %+v, want one restriction", before)
	}
	if got := s.Evaluate(nsTime(last+int64(6*time.Hour)), opt); got != nil {
		t.Errorf("6 h without samples: %+v, want withheld", got)
	}
	more := &model.Series{}
	readings(rng, more, last+int64(6*time.Hour), 30*time.Second, 120, 1.5, 0.001, 0, -1, -1)
	s.AddSeries(more, opt)
	after := s.Evaluate(nsTime(more.TimeNs[more.Len()-1]+30e9), opt)
	if len(after) != 1 || after[0].Kind != KindRestriction || after[0].MagnitudePct != before[0].MagnitudePct {
		t.Errorf("after the silence: %+v, want the same restriction as before %+v", after, before)
	}
}
