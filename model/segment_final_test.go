package model

import (
	"math"
	"math/rand/v2"
	"testing"
)

// quantise rounds every reading to q (a sensor's counts).
func quantise(s *Series, q float64) {
	for i, h := range s.HeadM {
		s.HeadM[i] = math.Round(h/q) * q
	}
}

// TestSegmentUpwardBlips: upward steps of a few counts (3-6 mm at 1 mm
// counts, 6-12 σ) lasting 3-8 samples inside a drain do not split it;
// the fill after the drain still ends it.
func TestSegmentUpwardBlips(t *testing.T) {
	for _, c := range []struct {
		stepM   float64
		samples int
	}{{0.003, 3}, {0.003, 5}, {0.004, 4}, {0.006, 6}, {0.005, 8}} {
		b := newSynth(2)
		b.aM2 = 8 // a slow drain (about 2 h 20 min from 2 m), 0.1-0.5 mm per sample
		b.idle(3600)
		b.drainTo(0.4)
		b.idle(1800)
		b.fill(2, 2e-3)
		b.idle(3600)
		b.drainTo(0)
		b.idle(3600)
		s := b.sample(10, 0.0005, rand.New(rand.NewPCG(3, uint64(c.samples))))
		// three blips in each drain, at a third, two thirds and 90 % of it
		blips := 0
		for _, tr := range b.truth {
			for _, at := range []float64{1.0 / 3, 2.0 / 3, 0.9} {
				i := int((tr.start + at*(tr.end-tr.start)) / 10)
				for j := i; j < i+c.samples; j++ {
					s.HeadM[j] += c.stepM
				}
				blips++
			}
		}
		quantise(s, 0.001)
		sg := NewSegmenter(synthTank(), SegmentOptions{Settle: -1})
		sg.Push(s.TimeNs, s.HeadM, nil)
		dr := drainsOf(sg.Flush())
		if got, want := len(dr), len(b.truth); got != want {
			t.Errorf("step %.0f mm × %d samples (%d blips): got %d drains, want %d", 1000*c.stepM, c.samples, blips, got, want)
			continue
		}
		for i, g := range dr {
			tr := b.truth[i]
			if d := math.Abs(secs(g.RawStartNs) - tr.start); d > 20 {
				t.Errorf("step %.0f mm × %d: drain %d starts %.0f s off", 1000*c.stepM, c.samples, i, d)
			}
			if d := math.Abs(secs(g.RawEndNs) - tr.end); d > 20 {
				t.Errorf("step %.0f mm × %d: drain %d ends %.0f s off", 1000*c.stepM, c.samples, i, d)
			}
		}
	}
}

// endOfData is an idle hour, then a drain of the unit tank from 2 m that
// the data cut off cutS seconds after it began (or, past its end, on the
// empty plateau).
func endOfData(cutS float64) (*synth, *Series) {
	b := newSynth(2)
	b.idle(3 * 3600)
	b.drainTo(0)
	b.idle(3600)
	s := b.sample(10, 0.002, rand.New(rand.NewPCG(12, 1)))
	end := b.truth[0].start + cutS
	n := 0
	for n < s.Len() && secs(s.TimeNs[n]) < end {
		n++
	}
	s.TimeNs, s.HeadM = s.TimeNs[:n], s.HeadM[:n]
	return b, s
}

// TestSegmentFinal: with the history known to be complete (FlushFinal), a
// drain that runs into the end of the data is emitted as a partial drain,
// and one with a quiet tail shorter than Settle is emitted complete;
// Flush keeps both back and counts them as pending.
func TestSegmentFinal(t *testing.T) {
	full := 1064.4332 // s, drain time of the unit tank from 2 m (computed, sim TestDrainTimeClosedForm)
	for _, c := range []struct {
		name     string
		cutS     float64
		complete bool
	}{
		{"cut at 40 %", 0.4 * full, false},
		{"cut at 90 %", 0.9 * full, false},
		{"3 min quiet tail", full + 180, true},
		{"20 min quiet tail", full + 1200, true},
	} {
		b, s := endOfData(c.cutS)
		sg := NewSegmenter(synthTank(), SegmentOptions{})
		sg.Push(s.TimeNs, s.HeadM, nil)
		if got := drainsOf(sg.Flush()); len(got) != 0 {
			t.Errorf("%s: Flush emitted %d drains, want 0 (pending)", c.name, len(got))
		}
		st := sg.Stats()
		if st.Pending != 1 || st.Falls != 1 {
			t.Errorf("%s: Flush stats: %d falls, %d pending; want 1 and 1", c.name, st.Falls, st.Pending)
		}
		fl := sg.TakeFalls()
		if len(fl) != 1 || fl[0].Outcome != FallPending {
			t.Errorf("%s: Flush falls %+v, want one pending", c.name, fl)
		}

		sg = NewSegmenter(synthTank(), SegmentOptions{})
		sg.Push(s.TimeNs, s.HeadM, nil)
		dr := drainsOf(sg.FlushFinal())
		if len(dr) != 1 {
			t.Errorf("%s: FlushFinal emitted %d drains, want 1 (stats %+v)", c.name, len(dr), sg.Stats())
			continue
		}
		g := dr[0]
		if g.Complete != c.complete {
			t.Errorf("%s: complete %v, want %v", c.name, g.Complete, c.complete)
		}
		if d := math.Abs(secs(g.RawStartNs) - b.truth[0].start); d > 20 {
			t.Errorf("%s: start %.0f s off", c.name, d)
		}
		wantEnd := min(b.truth[0].end, b.truth[0].start+c.cutS)
		if d := math.Abs(secs(g.RawEndNs) - wantEnd); d > 20 {
			t.Errorf("%s: end %.0f s, want %.0f s ± 20", c.name, secs(g.RawEndNs), wantEnd)
		}
		st = sg.Stats()
		if st.Falls != 1 || st.Drains != 1 || st.Pending != 0 {
			t.Errorf("%s: FlushFinal stats %+v, want 1 fall, 1 drain, 0 pending", c.name, st)
		}
		if cm := sg.CommittedNs(); cm <= g.RawStartNs {
			t.Errorf("%s: committed %d before the final drain's start %d: a later scan would emit it again", c.name, cm, g.RawStartNs)
		}
	}
}

// TestSegmentRejectReasons: each rejected fall is counted under its
// reason and listed with its times.
func TestSegmentRejectReasons(t *testing.T) {
	b := newSynth(2)
	b.idle(3 * 3600)
	b.drainTo(1.96) // 4 cm: below the minimum drop
	b.idle(3 * 3600)
	b.drainTo(0)
	b.idle(3 * 3600)
	s := b.sample(10, 0.001, rand.New(rand.NewPCG(4, 4)))
	sg := NewSegmenter(synthTank(), SegmentOptions{Settle: -1, MinDropM: 0.05, MinDuration: 5e9})
	sg.Push(s.TimeNs, s.HeadM, nil)
	dr := drainsOf(sg.Flush())
	st := sg.Stats()
	if len(dr) != 1 || st.Falls != 2 || st.RejectedSmall != 1 || st.Drains != 1 {
		t.Fatalf("got %d drains, stats %+v; want 1 drain, 2 falls, 1 too small", len(dr), st)
	}
	fl := sg.TakeFalls()
	if len(fl) != 2 {
		t.Fatalf("falls: got %d, want 2", len(fl))
	}
	for _, f := range fl {
		want := FallDrain
		if f.EndNs < dr[0].RawStartNs {
			want = FallTooSmall
		}
		if f.Outcome != want {
			t.Errorf("fall %.0f..%.0f s: %v, want %v", secs(f.StartNs), secs(f.EndNs), f.Outcome, want)
		}
	}
	// a minimum duration longer than any fall rejects both as too short
	sg = NewSegmenter(synthTank(), SegmentOptions{Settle: -1, MinDuration: 3600e9})
	sg.Push(s.TimeNs, s.HeadM, nil)
	sg.Flush()
	if st := sg.Stats(); st.RejectedShort != 2 || st.Drains != 0 {
		t.Errorf("min duration 1 h: stats %+v, want 2 too short", st)
	}
}
