package detect

import (
	"math"
	"math/rand/v2"
	"strings"
	"testing"
	"time"

	"drainsight/model"
)

// sensorTank returns a state with 8 idle records of noise sigma (the
// baseline of the stuck rule), starting at day 0.
func sensorTank(sigma float64) *State {
	s := NewState("sensor")
	for i := range 8 {
		s.AddIdle(model.IdleFit{EndNs: dayNs(float64(i) * 0.1), N: 300, NoiseM: sigma, FlatRun: 1}, Options{})
	}
	return s
}

// readings appends n samples every dt from t0 of a constant level with
// Gaussian noise sigma rounded to q (q = 0: continuous); stuckFrom/stuckTo
// (sample indices) freeze the reading.
func readings(rng *rand.Rand, ser *model.Series, t0 int64, dt time.Duration, n int, level, sigma, q float64, stuckFrom, stuckTo int) {
	var frozen float64
	for i := range n {
		v := level + sigma*rng.NormFloat64()
		if q > 0 {
			v = q * math.Round(v/q)
		}
		if i == stuckFrom {
			frozen = v
		}
		if i >= stuckFrom && i < stuckTo {
			v = frozen
		}
		ser.Append(t0+int64(i)*int64(dt), v)
	}
}

func TestPSameReading(t *testing.T) {
	for _, tt := range []struct{ sigma, q, want, tol float64 }{
		{1, 0, 0, 0},
		{0, 1, 1, 0},
		// q << σ: q/(σ√(2π)) (small-step limit).
		{1, 0.01, 0.01 / math.Sqrt(2*math.Pi), 1e-6},
		// σ = q: 2Φ(0.5) - 1 with Φ(0.5) = 0.69146 (standard normal table,
		// e.g. Abramowitz & Stegun 1964, table 26.1).
		{1, 1, 0.38292, 1e-5},
		{0.001, 0.004, 2*0.97725 - 1, 1e-5}, // Φ(2) = 0.97725, same table
	} {
		if got := pSameReading(tt.sigma, tt.q); math.Abs(got-tt.want) > tt.tol {
			t.Errorf("pSameReading(%g, %g) = %.6f, want %.6f ± %g", tt.sigma, tt.q, got, tt.want, tt.tol)
		}
	}
}

// TestStuckRuleFalseAlarm checks the stated per-evaluation false-alarm
// chance on healthy quantised readings, the level at a cell centre (the
// worst case): at a loose α the share of samples at which the current
// identical run reaches the rule's length stays below α.
func TestStuckRuleFalseAlarm(t *testing.T) {
	for _, tt := range []struct{ sigma, q, alpha float64 }{
		{0.001, 0.001, 1e-3},
		{0.002, 0.001, 1e-3},
		{0.001, 0.0005, 1e-4},
	} {
		opt := Options{SensorAlpha: tt.alpha}.withDefaults()
		s := sensorTank(tt.sigma)
		s.Sensor.QuantumM = tt.q
		lim := s.stuckRule(opt)
		// The rule without the 30-sample floor, to test the probability model.
		k := int(1 + math.Ceil(math.Log(tt.alpha)/math.Log(lim.pSame)))
		rng := rand.New(rand.NewPCG(1, 2))
		const n = 2_000_000
		run, hits, prev := 0, 0, math.NaN()
		for range n {
			v := tt.q * math.Round((1+tt.sigma*rng.NormFloat64())/tt.q)
			if v == prev {
				run++
			} else {
				run = 1
			}
			prev = v
			if run >= k {
				hits++
			}
		}
		got := float64(hits) / n
		if got > tt.alpha {
			t.Errorf("σ=%g q=%g: k=%d, healthy share with a run >= k = %.2g, want <= α = %g", tt.sigma, tt.q, k, got, tt.alpha)
		}
		if lim.samples < max(k, stuckFloorSamples) {
			t.Errorf("σ=%g q=%g: rule %d samples, want at least %d", tt.sigma, tt.q, lim.samples, k)
		}
	}
}

func TestStuckRunsVersusNoise(t *testing.T) {
	t0 := dayNs(1)
	opt := Options{}
	rng := rand.New(rand.NewPCG(3, 4))
	type want struct {
		at    time.Duration // evaluation time after t0
		stuck bool
	}
	for _, tt := range []struct {
		name          string
		dt            time.Duration
		n             int
		sigma, q      float64
		from, to      int
		checks        []want
		recoveredText bool
	}{
		// The demo's level sensor: 1.5 mm noise every 30 s, continuous,
		// stuck for 6 h from sample 2000 (16.7 h).
		{"continuous stuck 6 h", 30 * time.Second, 4000, 0.0015, 0, 2000, 2720, []want{
			{1000 * 30 * time.Second, false},
			{2100 * 30 * time.Second, true}, // 50 min into the stuck run
			{2719 * 30 * time.Second, true},
			{3000 * 30 * time.Second, true}, // recovered 2.3 h ago: still reported
		}, true},
		{"continuous healthy", 30 * time.Second, 20000, 0.0015, 0, -1, -1, []want{{20000 * 30 * time.Second, false}}, false},
		{"quantised healthy σ = q", 10 * time.Second, 50000, 0.001, 0.001, -1, -1, []want{{50000 * 10 * time.Second, false}}, false},
		// 20 min flat: 40 samples, above the floor, below StuckMin.
		{"short flat run", 30 * time.Second, 2000, 0.0015, 0, 1000, 1040, []want{{1039 * 30 * time.Second, false}}, false},
		// A quiet, coarse sensor repeats legitimately: never stuck.
		{"quiet coarse", 60 * time.Second, 3000, 0.0003, 0.001, -1, -1, []want{{3000 * 60 * time.Second, false}}, false},
	} {
		t.Run(tt.name, func(t *testing.T) {
			s := sensorTank(math.Max(tt.sigma, 0))
			if tt.name == "quiet coarse" {
				// The MAD of a coarse quiet reading is 0 in most idle periods.
				s = sensorTank(0)
			}
			ser := &model.Series{}
			readings(rng, ser, t0, tt.dt, tt.n, 1, tt.sigma, tt.q, tt.from, tt.to)
			for _, c := range tt.checks {
				part := &model.Series{}
				for i, ts := range ser.TimeNs {
					if ts <= t0+int64(c.at) {
						part.Append(ts, ser.HeadM[i])
					}
				}
				s.AddSeries(part, opt)
				var got []Finding
				for _, f := range s.Evaluate(nsTime(t0+int64(c.at)), opt) {
					if f.Subtype == SubStuck {
						got = append(got, f)
					}
				}
				if (len(got) > 0) != c.stuck {
					t.Errorf("at %v: %d stuck findings (%+v), want stuck = %v", c.at, len(got), got, c.stuck)
				}
				if len(got) > 0 {
					f := got[0]
					if on := nsTime(t0 + int64(tt.from)*int64(tt.dt)); !f.Onset.Equal(on) {
						t.Errorf("at %v: onset %v, want %v", c.at, f.Onset, on)
					}
					if !(f.PValue >= 0 && f.PValue <= 1) {
						t.Errorf("p = %g", f.PValue)
					}
					if rec := strings.Contains(f.Evidence, "recovered"); rec != (c.at >= time.Duration(tt.to)*tt.dt) {
						t.Errorf("at %v: evidence %q, recovered = %v", c.at, f.Evidence, rec)
					}
				}
			}
			if tt.recoveredText {
				// A day after the end it clears.
				end := t0 + int64(tt.to)*int64(tt.dt)
				later := &model.Series{}
				readings(rng, later, t0+int64(tt.n)*int64(tt.dt), tt.dt, 3000, 1, tt.sigma, tt.q, -1, -1)
				s.AddSeries(later, opt)
				for _, f := range s.Evaluate(nsTime(end+int64(25*time.Hour)), opt) {
					if f.Subtype == SubStuck {
						t.Errorf("25 h after recovery: still stuck: %s", f.Evidence)
					}
				}
				if got := len(s.Sensor.StuckRuns); got != 1 {
					t.Errorf("stuck runs = %d, want 1", got)
				}
			}
		})
	}
}

// TestStuckNeverSpansAGap: a stretch without samples is a gap (the feed's
// status), never part of a flat run. Each series is evaluated 30 s after its
// last sample, when the feed is ok again.
func TestStuckNeverSpansAGap(t *testing.T) {
	const dt = 30 * time.Second
	hole := 6 * time.Hour
	for _, tt := range []struct {
		name  string
		fresh bool // no idle records yet: the fixed StuckAfter rule applies
		opt   Options
		build func(rng *rand.Rand, ser *model.Series, t0 int64)
		stuck bool
		// longest stuck run reported, when stuck
		maxRun time.Duration
	}{
		{"6 h hole, continuous noise, noise known", false, Options{}, func(rng *rand.Rand, ser *model.Series, t0 int64) {
			readings(rng, ser, t0, dt, 600, 1, 0.0015, 0, -1, -1)
			readings(rng, ser, t0+600*int64(dt)+int64(hole), dt, 600, 1, 0.0015, 0, -1, -1)
		}, false, 0},
		// The readings on both sides of the hole are equal (1 mm counts):
		// a run of two identical readings lasting 6 h, which the fixed
		// 4 h rule would call stuck if the hole counted.
		{"6 h hole, same count on both sides, fixed 4 h rule", true, Options{StuckAfter: 4 * time.Hour}, func(rng *rand.Rand, ser *model.Series, t0 int64) {
			readings(rng, ser, t0, dt, 600, 1, 0.001, 0.001, -1, -1)
			v := ser.HeadM[ser.Len()-1]
			ser.Append(t0+600*int64(dt)+int64(hole), v)
			readings(rng, ser, t0+601*int64(dt)+int64(hole), dt, 600, 1.2, 0.001, 0.001, -1, -1)
		}, false, 0},
		// An emptied tank reading a clipped zero before and after a 13 h
		// hole: 20 identical readings spanning more than StuckAfter (12 h).
		{"13 h hole, clipped empty reading on both sides", true, Options{}, func(rng *rand.Rand, ser *model.Series, t0 int64) {
			readings(rng, ser, t0, dt, 600, 1, 0.001, 0.001, -1, -1)
			t1 := t0 + 600*int64(dt)
			for i := range 10 {
				ser.Append(t1+int64(i)*int64(dt), 0)
			}
			t2 := t1 + 9*int64(dt) + int64(13*time.Hour)
			for i := range 10 {
				ser.Append(t2+int64(i)*int64(dt), 0)
			}
			readings(rng, ser, t2+10*int64(dt), dt, 600, 1, 0.001, 0.001, -1, -1)
		}, false, 0},
		// A real stuck stretch with samples is still found.
		{"stuck 6 h with samples", false, Options{}, func(rng *rand.Rand, ser *model.Series, t0 int64) {
			readings(rng, ser, t0, dt, 600+720+600, 1, 0.0015, 0, 600, 600+720)
		}, true, 6 * time.Hour},
		// Stuck for 3 h, a 6 h hole, stuck 3 h more at the same value: two
		// stuck runs of 3 h each, neither spanning the hole.
		{"stuck 3 h, hole 6 h, stuck 3 h", false, Options{}, func(rng *rand.Rand, ser *model.Series, t0 int64) {
			readings(rng, ser, t0, dt, 600, 1, 0.0015, 0, -1, -1)
			v := ser.HeadM[ser.Len()-1]
			t1 := t0 + 600*int64(dt)
			for i := range 360 {
				ser.Append(t1+int64(i)*int64(dt), v)
			}
			t2 := t1 + 359*int64(dt) + int64(hole)
			for i := range 360 {
				ser.Append(t2+int64(i)*int64(dt), v)
			}
			readings(rng, ser, t2+360*int64(dt), dt, 600, 1, 0.0015, 0, -1, -1)
		}, true, 3 * time.Hour},
	} {
		t.Run(tt.name, func(t *testing.T) {
			rng := rand.New(rand.NewPCG(11, 12))
			s := sensorTank(0.0015)
			if tt.fresh {
				s = NewState("fresh")
			}
			t0 := dayNs(1)
			ser := &model.Series{}
			tt.build(rng, ser, t0)
			s.AddSeries(ser, tt.opt)
			now := nsTime(ser.TimeNs[ser.Len()-1] + 30e9)
			var got []Finding
			for _, f := range s.Evaluate(now, tt.opt) {
				if f.Subtype == SubStuck {
					got = append(got, f)
				}
			}
			if (len(got) > 0) != tt.stuck {
				t.Fatalf("stuck findings %+v, want stuck = %v", got, tt.stuck)
			}
			if n := len(s.Sensor.Gaps); n != 1 && tt.name != "stuck 6 h with samples" {
				t.Errorf("gaps = %d, want 1 (the hole is a gap)", n)
			}
			for _, r := range s.Sensor.StuckRuns {
				if d := time.Duration(r.EndNs - r.StartNs); d > tt.maxRun {
					t.Errorf("stuck run of %v (%s to %s), longest allowed %v", d, nsTime(r.StartNs), nsTime(r.EndNs), tt.maxRun)
				}
			}
			if tt.stuck && len(s.Sensor.StuckRuns) == 0 {
				t.Errorf("no stuck run recorded")
			}
		})
	}
}
