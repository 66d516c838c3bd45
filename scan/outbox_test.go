package scan_test

import (
	"context"
	"errors"
	"testing"
	"time"

	"drainsight/alert"
	"drainsight/detect"
	"drainsight/model"
	"drainsight/scan"
	"drainsight/store"
)

// fakeSink records what it was given and refuses while down.
type fakeSink struct {
	down     bool
	fits     map[int64]int // writes per fit end time
	findings int
	trans    []string
	calls    int
}

func (s *fakeSink) WriteTransition(_ context.Context, e alert.Event) error {
	s.calls++
	if s.down {
		return errors.New("503 service unavailable")
	}
	s.trans = append(s.trans, e.ID())
	return nil
}

func (s *fakeSink) WriteFits(_ context.Context, fits []model.Fit) error {
	s.calls++
	if s.down {
		return errors.New("503 service unavailable")
	}
	for _, f := range fits {
		s.fits[f.EndNs]++
	}
	return nil
}

func (s *fakeSink) WriteFindings(_ context.Context, f scan.FindingsAt) error {
	s.calls++
	if s.down {
		return errors.New("503 service unavailable")
	}
	s.findings += len(f.Findings)
	return nil
}

// The fits' write-back goes through the outbox: queued by the commit that
// stores them, kept while the sink is down (one attempt a round, then the
// backoff), written once it is back, and never queued twice for the same
// fits when a later pass re-commits the same history.
func TestWriteBackThroughOutbox(t *testing.T) {
	f := newFixture(t)
	f.plan.WriteBack = "influx:test"
	end := f.ser.TimeNs[f.ser.Len()-1] + 1
	// two passes of windows of 5 h: every commit with fits queues them
	fits := f.pass(end, int64(5*time.Hour), true)
	if len(fits) != 3 {
		t.Fatalf("%d fits, want the fixture's 3 drains", len(fits))
	}
	st := f.open()
	defer st.Close()
	queued, err := st.Pending("influx:test")
	if err != nil {
		t.Fatal(err)
	}
	if len(queued) == 0 || len(queued) > 3 {
		t.Fatalf("%d items queued for 3 fits committed in up to 3 windows", len(queued))
	}
	sink := &fakeSink{down: true, fits: map[int64]int{}}
	now := time.Now() // queue times and backoff are wall-clock times
	snd := &scan.Sender{Store: st}
	d, err := snd.Deliver(context.Background(), "influx:test", scan.WriteBackTo(sink), now)
	if err != nil {
		t.Fatal(err)
	}
	if d.Delivered != 0 || d.Deferred != 1 || d.Pending != len(queued) || sink.calls != 1 {
		t.Errorf("sink down: %+v after %d calls, want 1 attempt deferred and %d pending", d, sink.calls, len(queued))
	}
	// back up, but the failed item waits for its backoff (1 min): the
	// others go
	sink.down = false
	d, _ = snd.Deliver(context.Background(), "influx:test", scan.WriteBackTo(sink), now.Add(30*time.Second))
	if d.Delivered != len(queued)-1 || d.Pending != 1 {
		t.Errorf("within the backoff: %+v, want all but the deferred item delivered", d)
	}
	d, _ = snd.Deliver(context.Background(), "influx:test", scan.WriteBackTo(sink), now.Add(2*time.Minute))
	if d.Delivered != 1 || d.Pending != 0 {
		t.Errorf("after the backoff: %+v, want the last item delivered", d)
	}
	for _, fit := range fits {
		if sink.fits[fit.EndNs] != 1 {
			t.Errorf("fit ending %v written %d times, want once", time.Unix(0, fit.EndNs).UTC(), sink.fits[fit.EndNs])
		}
	}
	st.Close()
	// --reanalyse style: the same history committed again gives the same
	// items (stable ids), queued once each
	f.pass(end, int64(5*time.Hour), true)
	st2 := f.open()
	defer st2.Close()
	if again, _ := st2.Pending("influx:test"); len(again) != 0 {
		t.Errorf("a pass that fitted nothing new queued %d items", len(again))
	}
}

// An item older than MaxAge is dropped with a log line and counted, never
// retried forever; a findings item replaces the one before it.
func TestOutboxExpiryAndFindingsReplace(t *testing.T) {
	f := newFixture(t)
	st := f.open()
	defer st.Close()
	t0 := time.Date(2031, 8, 1, 0, 0, 0, 0, time.UTC)
	if err := st.Enqueue(store.OutboxItem{ID: "old", Sink: "s", Kind: scan.OutboxFits, QueuedNs: t0.UnixNano()}); err != nil {
		t.Fatal(err)
	}
	snd := &scan.Sender{Store: st, MaxAge: 48 * time.Hour}
	sink := &fakeSink{fits: map[int64]int{}}
	d, err := snd.Deliver(context.Background(), "s", scan.WriteBackTo(sink), t0.Add(72*time.Hour))
	if err != nil {
		t.Fatal(err)
	}
	if d.Expired != 1 || d.Pending != 0 || sink.calls != 0 {
		t.Errorf("%+v after %d calls, want the old item expired unsent", d, sink.calls)
	}
	det := detect.NewState("U1")
	det.LastFitNs = t0.UnixNano()
	for n := 1; n <= 2; n++ {
		fs := make([]detect.Finding, n)
		for i := range fs {
			fs[i] = detect.Finding{Tank: "U1", Kind: detect.KindRestriction}
		}
		if err := scan.QueueFindings(st, "s", det, fs); err != nil {
			t.Fatal(err)
		}
	}
	d, _ = snd.Deliver(context.Background(), "s", scan.WriteBackTo(sink), time.Now())
	if d.Delivered != 1 || sink.findings != 2 {
		t.Errorf("%+v, %d findings written: want one item, the second pass's 2 findings", d, sink.findings)
	}
}
