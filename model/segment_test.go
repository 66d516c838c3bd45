package model

import (
	"math"
	"math/rand/v2"
	"testing"
	"time"
)

func drainsOf(segs []Segment) []Segment {
	var out []Segment
	for _, g := range segs {
		if g.Kind == Drain {
			out = append(out, g)
		}
	}
	return out
}

func kindsOf(segs []Segment, k SegmentKind) int {
	n := 0
	for _, g := range segs {
		if g.Kind == k {
			n++
		}
	}
	return n
}

func secs(tn int64) float64 { return float64(tn-synthT0) * 1e-9 }

// tailTime is how long a cylinder drain takes over its last x metres.
func tailTime(b *synth, x float64) float64 { return math.Sqrt(x) / (b.kM25s / (2 * b.aM2)) }

func TestSegmentDrainsTable(t *testing.T) {
	cases := []struct {
		name  string
		dt    float64
		sigma float64
	}{
		{"1s_0.5mm", 1, 0.0005},
		{"1s_5mm", 1, 0.005},
		{"10s_2mm", 10, 0.002},
		{"30s_1mm", 30, 0.001},
		{"60s_0.5mm", 60, 0.0005},
		{"60s_5mm", 60, 0.005},
	}
	for ci, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			b := standardDay()
			s := b.sample(c.dt, c.sigma, rand.New(rand.NewPCG(1, uint64(ci))))
			segs := SegmentSeries(synthTank(), s, SegmentOptions{Settle: -1})
			dr := drainsOf(segs)
			if got, want := len(dr), len(b.truth); got != want {
				for _, g := range segs {
					t.Logf("%v %.0f..%.0f n=%d complete=%v empty=%.4f", g.Kind, secs(g.RawStartNs), secs(g.RawEndNs), len(g.TimeNs), g.Complete, g.EmptyHeadM)
				}
				t.Fatalf("drains: got %d, want %d", got, want)
			}
			for i, g := range dr {
				tr := b.truth[i]
				// start: within 3 samples plus the time to fall 2 σ at the initial rate
				rate := b.kM25s * math.Sqrt(tr.h0) / b.aM2
				tolS := 3*c.dt + 2*c.sigma/rate
				if got := secs(g.RawStartNs); math.Abs(got-tr.start) > tolS {
					t.Errorf("drain %d start: got %.1f s, want %.1f s ± %.1f", i, got, tr.start, tolS)
				}
				// end: within 3 samples plus the time of the last 4 σ of head, or of
				// the last 0.5 % of the drop on the empty tail (trimmed anyway)
				tolE := 3 * c.dt
				if tr.complete {
					tolE += tailTime(b, max(4*c.sigma, 0.005*tr.h0))
				} else {
					tolE += 4 * c.sigma / (b.kM25s * math.Sqrt(tr.h1) / b.aM2)
				}
				if got := secs(g.RawEndNs); math.Abs(got-tr.end) > tolE {
					t.Errorf("drain %d end: got %.1f s, want %.1f s ± %.1f", i, got, tr.end, tolE)
				}
				if g.Complete != tr.complete {
					t.Errorf("drain %d complete: got %v, want %v", i, g.Complete, tr.complete)
				}
				if g.Complete && math.Abs(g.EmptyHeadM) > 3*c.sigma {
					t.Errorf("drain %d empty head: got %.4f m, want 0 ± %.4f", i, g.EmptyHeadM, 3*c.sigma)
				}
				if !g.Complete && !math.IsNaN(g.EmptyHeadM) {
					t.Errorf("drain %d empty head: got %v, want NaN", i, g.EmptyHeadM)
				}
				if secs(g.TimeNs[0]) < secs(g.RawStartNs)+15 {
					t.Errorf("drain %d: transient not trimmed: first kept %.1f s, raw start %.1f s", i, secs(g.TimeNs[0]), secs(g.RawStartNs))
				}
				if len(g.TimeNs) < 6 || len(g.HeadM) != len(g.TimeNs) || g.InflowM3s != nil {
					t.Errorf("drain %d: %d times, %d heads, inflow %v", i, len(g.TimeNs), len(g.HeadM), g.InflowM3s != nil)
				}
				// the empty tail is trimmed: no kept sample within EmptyHeadM of the plateau
				if g.Complete {
					last := g.HeadM[len(g.HeadM)-1]
					if last < -5*c.sigma {
						t.Errorf("drain %d: tail reaches %.4f m", i, last)
					}
				}
			}
			if got, want := kindsOf(segs, Fill), 2; got != want {
				t.Errorf("fills: got %d, want %d", got, want)
			}
			// idle stretches of ≥ 1 h: before the first drain (2 h), after the first fill (3 h),
			// after the partial drain (3 h); the last one (2 h) is still under way at the end.
			if got, want := kindsOf(segs, Idle), 3; got != want {
				t.Errorf("idles: got %d, want %d", got, want)
			}
		})
	}
}

func TestSegmentSpikes(t *testing.T) {
	b := standardDay()
	rng := rand.New(rand.NewPCG(7, 7))
	s := b.sample(10, 0.002, rng)
	injected := 0
	for i := 5; i < s.Len()-5; i += 40 + rng.IntN(40) {
		sign := 1.0
		if rng.IntN(2) == 0 {
			sign = -1
		}
		s.HeadM[i] += sign * (0.1 + 0.4*rng.Float64())
		injected++
	}
	sg := NewSegmenter(synthTank(), SegmentOptions{Settle: -1})
	sg.Push(s.TimeNs, s.HeadM, nil)
	segs := sg.Flush()
	dr := drainsOf(segs)
	if got, want := len(dr), 3; got != want {
		t.Fatalf("drains: got %d, want %d", got, want)
	}
	if got := sg.Stats().Spikes; got < injected*9/10 || got > injected*6/5 {
		t.Errorf("spikes: got %d, want about %d", got, injected)
	}
	total := 0
	for _, g := range segs {
		total += g.Spikes
	}
	if total == 0 {
		t.Errorf("no spikes counted in segments")
	}
	for i, g := range dr {
		for j, tn := range g.TimeNs {
			// each kept head must lie on the drain curve within 5 σ
			want := b.ph[phaseAt(b, secs(tn))].f(secs(tn))
			if d := math.Abs(g.HeadM[j] - want); d > 0.01 {
				t.Errorf("drain %d kept a spike at %.0f s: %.3f m off the curve", i, secs(tn), d)
			}
		}
	}
}

func phaseAt(b *synth, t float64) int {
	for k, p := range b.ph {
		if t < p.t1 {
			return k
		}
	}
	return len(b.ph) - 1
}

func TestSegmentGap(t *testing.T) {
	b := newSynth(2)
	b.aM2 = 4 // drain takes 4257.7 s
	b.idle(3600)
	b.drainTo(0)
	b.idle(3 * 3600)
	s := b.sample(5, 0.002, rand.New(rand.NewPCG(3, 3)))
	g0, g1 := synthT0+int64((3600+1000)*1e9), synthT0+int64((3600+1900)*1e9) // 15 min hole
	var cut Series
	for i, tn := range s.TimeNs {
		if tn < g0 || tn >= g1 {
			cut.Append(tn, s.HeadM[i])
		}
	}
	segs := SegmentSeries(synthTank(), &cut, SegmentOptions{Settle: -1})
	dr := drainsOf(segs)
	if got, want := len(dr), 1; got != want {
		t.Fatalf("drains: got %d, want %d", got, want)
	}
	if got, want := dr[0].GapCount, 1; got != want {
		t.Errorf("gap count: got %d, want %d", got, want)
	}
	if !dr[0].Complete {
		t.Errorf("complete: got false, want true")
	}
}

func TestSegmentInflow(t *testing.T) {
	build := func() *synth {
		b := newSynth(2)
		b.idle(2 * 3600)
		b.drainTo(0) // clean
		b.idle(1800)
		b.fill(2, 2e-3)
		b.idle(2 * 3600)
		// inflow half the initial outflow: the level settles at (q/K)^2 = 0.5 m
		b.drainInflow(0.5*b.kM25s*math.Sqrt(2), 4000)
		b.idle(2 * 3600)
		return b
	}
	for _, metered := range []bool{false, true} {
		b := build()
		s := b.sample(10, 0.002, rand.New(rand.NewPCG(5, 5)))
		if metered {
			s.InflowM3s = b.inflow(s)
		}
		sg := NewSegmenter(synthTank(), SegmentOptions{Settle: -1})
		sg.Push(s.TimeNs, s.HeadM, s.InflowM3s)
		dr := drainsOf(sg.Flush())
		want := 1
		if metered {
			want = 2
		}
		if got := len(dr); got != want {
			t.Fatalf("metered=%v drains: got %d, want %d (stats %+v)", metered, got, want, sg.Stats())
		}
		if !metered {
			if got := sg.Stats().RejectedInflow; got != 1 {
				t.Errorf("rejected for inflow: got %d, want 1", got)
			}
			continue
		}
		g := dr[1]
		if g.InflowM3s == nil || len(g.InflowM3s) != len(g.TimeNs) {
			t.Fatalf("metered drain without inflow samples")
		}
		if g.Complete {
			t.Errorf("metered inflow drain: complete true, want false")
		}
	}
}

func TestSegmentNoiseEstimate(t *testing.T) {
	for _, sigma := range []float64{0.0005, 0.002, 0.005} {
		b := standardDay()
		s := b.sample(2, sigma, rand.New(rand.NewPCG(11, 1)))
		sg := NewSegmenter(synthTank(), SegmentOptions{})
		sg.Push(s.TimeNs, s.HeadM, nil)
		if got := sg.NoiseM(); math.Abs(got/sigma-1) > 0.1 {
			t.Errorf("noise: got %.5f m, want %.5f m ± 10 %%", got, sigma)
		}
	}
}

// multiDay repeats the standard day n times.
func multiDay(n int) *synth {
	b := newSynth(2)
	for range n {
		b.idle(2 * 3600)
		b.drainTo(0)
		b.idle(1800)
		b.fill(2, 2e-3)
		b.idle(3 * 3600)
		b.drainTo(0.8)
		b.idle(3 * 3600)
		b.drainTo(0)
		b.idle(1200)
		b.fill(2, 1e-3)
	}
	b.idle(4 * 3600)
	return b
}

func segEqual(a, b Segment) bool {
	f := func(x, y float64) bool { return x == y || (math.IsNaN(x) && math.IsNaN(y)) }
	if a.Kind != b.Kind || a.RawStartNs != b.RawStartNs || a.RawEndNs != b.RawEndNs || a.Complete != b.Complete ||
		!f(a.EmptyHeadM, b.EmptyHeadM) || a.Spikes != b.Spikes || a.GapCount != b.GapCount ||
		len(a.TimeNs) != len(b.TimeNs) || (a.InflowM3s == nil) != (b.InflowM3s == nil) {
		return false
	}
	for i := range a.TimeNs {
		if a.TimeNs[i] != b.TimeNs[i] || !f(a.HeadM[i], b.HeadM[i]) {
			return false
		}
	}
	return true
}

func TestSegmentSplitInvariance(t *testing.T) {
	b := multiDay(5)
	s := b.sample(5, 0.002, rand.New(rand.NewPCG(2, 9)))
	tank := synthTank()
	ref := SegmentSeries(tank, s, SegmentOptions{})
	if len(drainsOf(ref)) != 15 {
		t.Fatalf("reference drains: got %d, want 15", len(drainsOf(ref)))
	}
	splits := map[string]func(n int) []int{
		"one-by-one": func(n int) []int {
			c := make([]int, n)
			for i := range c {
				c[i] = 1
			}
			return c
		},
		"day": func(n int) []int {
			var c []int
			for n > 0 {
				k := min(n, 86400/5)
				c = append(c, k)
				n -= k
			}
			return c
		},
		"random": func(n int) []int {
			rng := rand.New(rand.NewPCG(4, 4))
			var c []int
			for n > 0 {
				k := min(n, rng.IntN(3000))
				c = append(c, k)
				n -= k
			}
			return c
		},
	}
	for name, split := range splits {
		sg := NewSegmenter(tank, SegmentOptions{})
		var got []Segment
		at := 0
		for _, k := range split(s.Len()) {
			sg.Push(s.TimeNs[at:at+k], s.HeadM[at:at+k], nil)
			at += k
			if k%7 == 0 {
				got = append(got, sg.Take()...)
			}
		}
		got = append(got, sg.Flush()...)
		if len(got) != len(ref) {
			t.Errorf("%s: got %d segments, want %d", name, len(got), len(ref))
			continue
		}
		for i := range got {
			if !segEqual(got[i], ref[i]) {
				t.Errorf("%s: segment %d differs", name, i)
			}
		}
	}
}

func TestSegmentExactlyOnce(t *testing.T) {
	b := multiDay(6)
	s := b.sample(10, 0.003, rand.New(rand.NewPCG(8, 1)))
	tank := synthTank()
	ref := SegmentSeries(tank, s, SegmentOptions{})
	lookback := int64(12 * time.Hour)
	for cut := s.TimeNs[0] + int64(30*time.Hour); cut < s.TimeNs[s.Len()-1]-int64(20*time.Hour); cut += int64(53 * time.Minute) {
		n1 := 0
		for n1 < s.Len() && s.TimeNs[n1] < cut {
			n1++
		}
		sg := NewSegmenter(tank, SegmentOptions{})
		sg.Push(s.TimeNs[:n1], s.HeadM[:n1], nil)
		first := sg.Flush()
		c := sg.CommittedNs()
		i2 := 0
		for i2 < s.Len() && s.TimeNs[i2] < c-lookback {
			i2++
		}
		sg2 := NewSegmenter(tank, SegmentOptions{EmitFromNs: c})
		sg2.Push(s.TimeNs[i2:], s.HeadM[i2:], nil)
		second := sg2.Flush()
		all := append(first, second...)
		if len(all) != len(ref) {
			t.Errorf("cut %.0f h: got %d segments (%d+%d), want %d", secs(cut)/3600, len(all), len(first), len(second), len(ref))
			continue
		}
		for i := range all {
			if all[i].Kind != ref[i].Kind || math.Abs(float64(all[i].RawStartNs-ref[i].RawStartNs)) > 60e9 {
				t.Errorf("cut %.0f h: segment %d: got %v at %.0f s, want %v at %.0f s", secs(cut)/3600, i,
					all[i].Kind, secs(all[i].RawStartNs), ref[i].Kind, secs(ref[i].RawStartNs))
			}
		}
	}
}

// TestSegmentLeakBeforeDrain: a slow leak (10 mm/h) during the idle period
// before a drain must not drag the drain's start back into the idle period.
func TestSegmentLeakBeforeDrain(t *testing.T) {
	b := newSynth(2)
	b.leakIdle(4*3600, 0.010/3600)
	b.drainTo(0)
	b.idle(2 * 3600)
	b.fill(1.5, 2e-3)
	b.leakIdle(4*3600, 0.010/3600)
	b.drainTo(0.6)
	b.leakIdle(3*3600, 0.010/3600)
	s := b.sample(20, 0.001, rand.New(rand.NewPCG(9, 9)))
	dr := drainsOf(SegmentSeries(synthTank(), s, SegmentOptions{Settle: -1}))
	if got, want := len(dr), 2; got != want {
		t.Fatalf("drains: got %d, want %d", got, want)
	}
	for i, g := range dr {
		if got, want := secs(g.RawStartNs), b.truth[i].start; math.Abs(got-want) > 60 {
			t.Errorf("drain %d start: got %.0f s, want %.0f s ± 60", i, got, want)
		}
		if got, want := g.Complete, b.truth[i].complete; got != want {
			t.Errorf("drain %d complete: got %v, want %v", i, got, want)
		}
	}
}
