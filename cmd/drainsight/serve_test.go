package main

import (
	"io"
	"log/slog"
	"sync/atomic"
	"testing"
	"testing/synctest"
	"time"
)

// TestSchedulerRunsAndSurvivesPanics drives the cron scheduler on a fake
// clock: a scan every minute runs ten times in ten minutes even though its
// first run panics (robfig/cron v3.0.1 skips such a job forever when
// Recover wraps SkipIfStillRunning; our chain has them the other way round),
// and the Monday 06:00 report runs once over a week.
func TestSchedulerRunsAndSurvivesPanics(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		var scans, reports atomic.Int32
		scan := func() {
			if scans.Add(1) == 1 {
				panic("first scan fails")
			}
		}
		report := func() { reports.Add(1) }
		log := slog.New(slog.NewTextHandler(io.Discard, nil))
		c, err := newScheduler(time.UTC, log, "@every 1m", scan, "0 6 * * 1", report)
		if err != nil {
			t.Fatal(err)
		}
		c.Start()
		time.Sleep(10*time.Minute + time.Second)
		if got := scans.Load(); got != 10 {
			t.Errorf("scans in 10 min = %d, want 10", got)
		}
		time.Sleep(7 * 24 * time.Hour)
		if got := reports.Load(); got != 1 {
			t.Errorf("reports in a week = %d, want 1", got)
		}
		<-c.Stop().Done()
	})
}

func TestSchedulerRejectsBadSpec(t *testing.T) {
	log := slog.New(slog.NewTextHandler(io.Discard, nil))
	if _, err := newScheduler(time.UTC, log, "61 * * * *", func() {}, "@weekly", func() {}); err == nil {
		t.Error("a minute of 61 was accepted")
	}
}
