package main

import (
	"io"
	"log/slog"
	"path/filepath"
	"sync/atomic"
	"testing"
	"testing/synctest"
	"time"

	"drainsight/config"
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

// A weekly report (Monday 06:00) missed while serve was down is written at
// start-up, and only then: the cases are the calendar's (2026-11-30 is a
// Monday; Berlin is UTC+1 in winter, common practice).
func TestReportMissedWhileDown(t *testing.T) {
	berlin, err := time.LoadLocation("Europe/Berlin")
	if err != nil {
		t.Skip("no time zone data:", err)
	}
	at := func(s string) time.Time {
		v, err := time.Parse(time.RFC3339, s)
		if err != nil {
			t.Fatal(err)
		}
		return v
	}
	for _, c := range []struct {
		loc       *time.Location
		last, now string
		want      bool
	}{
		{time.UTC, "2026-11-30T06:00:05Z", "2026-12-01T12:00:00Z", false},
		{time.UTC, "2026-11-30T06:00:05Z", "2026-12-07T06:30:00Z", true},
		{time.UTC, "2026-11-23T06:00:05Z", "2026-12-03T09:00:00Z", true}, // down over a Monday
		{berlin, "2026-11-30T05:00:10Z", "2026-12-07T04:59:00Z", false},  // 05:59 in Berlin
		{berlin, "2026-11-30T05:00:10Z", "2026-12-07T05:01:00Z", true},   // 06:01 in Berlin
	} {
		got, err := scheduleFiredBetween("0 6 * * 1", c.loc, at(c.last), at(c.now))
		if err != nil || got != c.want {
			t.Errorf("%s, last %s, now %s: %v %v, want %v", c.loc, c.last, c.now, got, err, c.want)
		}
	}
}

// Writing the report records it in the state file, so a restart right after
// does not write it again.
func TestReportRunRecorded(t *testing.T) {
	dir := demoPlant(t, "20")
	cfg, err := config.Load(filepath.Join(dir, "demo.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	if err := writeReportFiles(cfg, "", t.TempDir(), time.Now().UTC(), slog.New(slog.DiscardHandler)); err != nil {
		t.Fatal(err)
	}
	now := time.Now()
	missed, err := reportMissed(cfg, time.UTC, now)
	if fired, _ := scheduleFiredBetween(cfg.Outputs.Report.Schedule, time.UTC, now.Add(-time.Minute), now); fired {
		t.Skip("the test ran at the report's own time")
	}
	if err != nil || missed {
		t.Errorf("right after a report: missed %v, %v; want false", missed, err)
	}
}
