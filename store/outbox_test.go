package store

import (
	"errors"
	"path/filepath"
	"testing"
	"time"

	"drainsight/model"
)

// The outbox keeps what must leave the process: queued with the commit it
// reports (one transaction), listed oldest first, replaced by ID, kept when
// queued again after it was read, and still there after the file is
// closed and opened again.
func TestOutboxWithCommit(t *testing.T) {
	path := filepath.Join(t.TempDir(), "s.db")
	s, err := Open(path, time.Second)
	if err != nil {
		t.Fatal(err)
	}
	a := OutboxItem{ID: "influx:s|fits|T1|10-20", Sink: "influx:s", Kind: "fits", Data: []byte("a"), QueuedNs: 200}
	b := OutboxItem{ID: "influx:s|findings|T1", Sink: "influx:s", Kind: "findings", Data: []byte("b"), QueuedNs: 100}
	c := OutboxItem{ID: "mail|x", Sink: "mail", Kind: "note", Data: []byte("c"), QueuedNs: 50}
	if err := s.CommitTank("T1", TankCommit{Fits: []model.Fit{{Tank: "T1", StartNs: 5, EndNs: 10}}, Outbox: []OutboxItem{a}}); err != nil {
		t.Fatal(err)
	}
	if err := s.Enqueue(b, c); err != nil {
		t.Fatal(err)
	}
	// a bad item fails the whole commit: the fit is not stored either
	if err := s.CommitTank("T1", TankCommit{Fits: []model.Fit{{Tank: "T1", StartNs: 30, EndNs: 40}}, Outbox: []OutboxItem{{ID: "x"}}}); err == nil {
		t.Error("commit with an item without a sink: no error")
	}
	if fits, _ := s.Fits("T1", 0, 100); len(fits) != 1 {
		t.Errorf("%d fits stored, want 1 (the failed commit wrote nothing)", len(fits))
	}
	s.Close()
	if s, err = Open(path, time.Second); err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	got, err := s.Pending("influx:s")
	if err != nil {
		t.Fatal(err)
	}
	if len(got) != 2 || got[0].ID != b.ID || got[1].ID != a.ID {
		t.Fatalf("pending %+v, want the findings item then the fits item", got)
	}
	if all, _ := s.Pending(""); len(all) != 3 || all[0].ID != c.ID {
		t.Errorf("all pending %+v, want 3, the mail item first", all)
	}
	// a failed delivery counts an attempt and sets the next time
	if err := s.Deferred(a.ID, 900, "refused"); err != nil {
		t.Fatal(err)
	}
	if err := s.Deferred("none", 900, "x"); !errors.Is(err, ErrNotQueued) {
		t.Errorf("deferring an unknown item: %v, want ErrNotQueued", err)
	}
	got, _ = s.Pending("influx:s")
	if got[1].Attempts != 1 || got[1].NextNs != 900 || got[1].LastError != "refused" {
		t.Errorf("deferred item %+v, want 1 attempt, next 900, error kept", got[1])
	}
	// queued again with new content after it was read: delivering the old
	// content leaves the new one queued
	b2 := b
	b2.Data, b2.QueuedNs = []byte("b2"), 300
	if err := s.Enqueue(b2); err != nil {
		t.Fatal(err)
	}
	if err := s.Delivered(got...); err != nil {
		t.Fatal(err)
	}
	left, _ := s.Pending("influx:s")
	if len(left) != 1 || string(left[0].Data) != "b2" {
		t.Errorf("left %+v, want only the re-queued findings item", left)
	}
}
