package main

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"os"
	"sync"
	"time"

	"github.com/robfig/cron/v3"

	"drainsight/config"
)

const serveAbout = `Runs the job on its schedules until interrupted: a scan on
outputs.scan_schedule and the outlet-health report on outputs.report.schedule
(cron specs, time zone outputs.report.time_zone). A scan still running when
the next is due is skipped, a panic in a run is logged and the next run goes
ahead. A scan runs at start-up (checkpoints make one enough to catch up after
downtime), and a report whose time passed while serve was down is written
then. Scans evaluate at the clock, so a file that stopped growing shows as a
silent feed. At SIGTERM the run in flight stops at its next window or file
block, keeping what it committed (at most 30 s), and serve exits 0.
Keep local-time schedules out of 01:00-03:00 where clocks change. After the
first successful scan of each UTC day a copy of the state file is written to
backups/ beside it; the last 7 are kept (drainsight state --help).

On outputs.http.address (default 127.0.0.1:9470, this machine only; off for
none) it answers, read-only: /healthz (the process is alive), /readyz (the
last scan succeeded and every InfluxDB site answers a query), /metrics (for
Prometheus: scans by result and their duration, samples read, drains fitted,
falls rejected by reason, open findings by tank and kind, notifications and
write-back pending, seconds since each feed's newest sample, the last
success) and / (the fleet at the last scan). With outputs.http.token_env or
token_file every page but /healthz needs "Authorization: Bearer <token>".`

func runServe(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "serve", "serve --config FILE", serveAbout)
	cfgPath := fs.String("config", "", "configuration file (required)")
	shardFlag := fs.String("shard", "", shardUsage)
	verbose := fs.Bool("v", false, "debug logging")
	newState := fs.Bool("new-state", false, newStateUsage)
	if err := parseFlags(e, fs, args); err != nil {
		return err
	}
	if *cfgPath == "" {
		return &usageError{"serve: --config is required"}
	}
	log := newLogger(e.stderr, *verbose)
	cfg, err := config.LoadContext(ctx, *cfgPath)
	if err != nil {
		return err
	}
	sh, err := parseShard(*shardFlag)
	if err != nil {
		return &usageError{err.Error()}
	}
	cfg = sh.apply(cfg)
	// Only the first scan may create a missing state file: one that
	// disappears while serving is an error, never a fresh start.
	create := *newState || cfg.Outputs.NewState
	if _, err := os.Stat(cfg.Outputs.StateFile); errors.Is(err, os.ErrNotExist) && !create {
		return missingState(cfg.Outputs.StateFile)
	}
	loc := cfg.Outputs.Report.Location
	if loc == nil {
		loc = time.UTC
	}
	mon := newMonitor()
	if addr := cfg.Outputs.HTTP.Address; addr != "off" {
		token, err := cfg.Outputs.HTTP.Token()
		if err != nil {
			return err
		}
		bound, _, err := serveHTTP(ctx, addr, mon.handler(token, sitesReady(cfg)), log)
		if err != nil {
			return err
		}
		log.Info("http", "address", bound, "token", token != "")
	}
	// The scan and the report share the state file (one process at a time
	// holds its lock): they take turns.
	var turn sync.Mutex
	scan := func() {
		turn.Lock()
		defer turn.Unlock()
		start := time.Now()
		// Evaluated at the clock, for files too: a file feed that stopped
		// growing goes silent as an InfluxDB feed does.
		res, err := scanOnce(ctx, e, cfg, "", "", scanOptions{now: start.UTC(), newState: create}, log)
		create = false
		mon.record(res, time.Since(start), err)
		if err != nil {
			log.Error("scheduled scan failed", "err", err)
			var pending errNotificationsPending
			if !errors.As(err, &pending) {
				return // the scan's own work failed: no copy of a half-done state
			}
		}
		if name, err := dailyBackup(cfg.Outputs.StateFile, time.Now()); err != nil {
			log.Error("daily backup of the state file failed", "err", err)
		} else if name != "" {
			log.Info("state file backed up", "file", name)
		}
	}
	rep := func() {
		turn.Lock()
		defer turn.Unlock()
		if err := writeReportFiles(cfg, "", cfg.Outputs.Directory, time.Now().UTC(), log); err != nil {
			log.Error("scheduled report failed", "err", err)
		} else {
			log.Info("report written", "dir", cfg.Outputs.Directory)
		}
	}
	c, err := newScheduler(loc, log, cfg.Outputs.ScanSchedule, scan, cfg.Outputs.Report.Schedule, rep)
	if err != nil {
		return err
	}
	log.Info("serving", "scan_schedule", cfg.Outputs.ScanSchedule, "report_schedule", cfg.Outputs.Report.Schedule, "zone", loc.String())
	scan()
	// A report whose time passed while serve was down is written now.
	if missed, err := reportMissed(cfg, loc, time.Now()); err != nil {
		log.Warn("checking for a missed report", "err", err)
	} else if missed {
		log.Info("writing the report missed while down")
		rep()
	}
	c.Start()
	<-ctx.Done()
	// The run in flight sees the cancelled context: a scan stops at its
	// next window or file block with what it committed kept.
	select {
	case <-c.Stop().Done():
	case <-time.After(stopDeadline):
		log.Warn("a run did not stop within the deadline; leaving it", "deadline", stopDeadline)
	}
	log.Info("stopped")
	return nil
}

// stopDeadline is how long serve waits for the run in flight at SIGTERM.
const stopDeadline = 30 * time.Second

// reportMissed tells whether the report's schedule fired between the last
// report written (the store's job run; never written counts as missed) and
// now.
func reportMissed(cfg *config.Config, loc *time.Location, now time.Time) (bool, error) {
	st, err := openStore(cfg.Outputs.StateFile, false)
	if err != nil {
		return false, err
	}
	r, ok, err := st.JobRun("report")
	st.Close()
	if err != nil {
		return false, err
	}
	if !ok || r.LastSuccessNs == 0 {
		return true, nil
	}
	return scheduleFiredBetween(cfg.Outputs.Report.Schedule, loc, time.Unix(0, r.LastSuccessNs), now)
}

// scheduleFiredBetween tells whether spec (a cron spec in loc) fires in
// (from, to].
func scheduleFiredBetween(spec string, loc *time.Location, from, to time.Time) (bool, error) {
	sched, err := cron.ParseStandard(spec)
	if err != nil {
		return false, err
	}
	next := sched.Next(from.In(loc))
	return !next.IsZero() && !next.After(to), nil
}

// slogCron adapts slog to cron's logger.
type slogCron struct{ l *slog.Logger }

func (s slogCron) Info(msg string, kv ...any) { s.l.Debug("cron: "+msg, kv...) }
func (s slogCron) Error(err error, msg string, kv ...any) {
	s.l.Error("cron: "+msg, append([]any{"err", err}, kv...)...)
}

// newScheduler builds the cron scheduler. SkipIfStillRunning wraps Recover
// (in that order) because cron v3.0.1 would otherwise skip a job forever
// after its first panic.
func newScheduler(loc *time.Location, log *slog.Logger, scanSpec string, scan func(), reportSpec string, report func()) (*cron.Cron, error) {
	l := slogCron{log}
	c := cron.New(cron.WithLocation(loc), cron.WithLogger(l),
		cron.WithChain(cron.SkipIfStillRunning(l), cron.Recover(l)))
	if _, err := c.AddFunc(scanSpec, scan); err != nil {
		return nil, fmt.Errorf("outputs.scan_schedule %q: %w", scanSpec, err)
	}
	if _, err := c.AddFunc(reportSpec, report); err != nil {
		return nil, fmt.Errorf("outputs.report.schedule %q: %w", reportSpec, err)
	}
	return c, nil
}
