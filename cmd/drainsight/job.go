package main

import (
	"cmp"
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"slices"
	"strings"
	"sync"
	"time"

	"drainsight/alert"
	"drainsight/config"
	"drainsight/ingest"
	"drainsight/ingest/influx"
	"drainsight/model"
	"drainsight/scan"
	"drainsight/store"
)

// job is one configured plant: its plans, its state and its connections.
type job struct {
	cfg   *config.Config
	plans []*plan
	// recv indexes what outlets discharge into: the plans and the levels
	// (basins read only for the head across those outlets).
	recv    map[string]*plan
	st      *store.Store
	log     *slog.Logger
	clients map[string]*influx.Client // per site id, only sites with InfluxDB
	workers int
	// notifiers by outbox sink name (notify.go)
	notifiers map[string]alert.Notifier
}

// openJob loads nothing itself: it wires a loaded config into a job and
// opens the state store (with a lock timeout) and the InfluxDB clients.
func openJob(cfg *config.Config, statePath string, create bool, log *slog.Logger) (*job, error) {
	plans, err := buildPlans(cfg)
	if err != nil {
		return nil, err
	}
	levels, err := buildLevels(cfg)
	if err != nil {
		return nil, err
	}
	if statePath == "" {
		statePath = cfg.Outputs.StateFile
	}
	clients, err := openClients(cfg)
	if err != nil {
		return nil, err
	}
	st, err := openStore(statePath, create)
	if err != nil {
		closeClients(clients)
		return nil, err
	}
	return &job{cfg: cfg, plans: plans, recv: receivers(plans, levels), st: st, log: log, clients: clients, workers: 2,
		notifiers: notifiers(cfg, log)}, nil
}

// openClients opens one InfluxDB client per site that has a server; the
// token is read from its environment variable or file, never from the config.
func openClients(cfg *config.Config) (map[string]*influx.Client, error) {
	clients := map[string]*influx.Client{}
	for _, s := range cfg.Sites {
		if s.Influx == nil {
			continue
		}
		tok, err := s.Influx.Token()
		if err == nil {
			var c *influx.Client
			c, err = influx.New(influx.Conn{URL: s.Influx.URL, Org: s.Influx.Org, Bucket: s.Influx.Bucket, Token: tok},
				influx.Options{QueryTimeout: s.Influx.Timeout, WriteTimeout: s.Influx.Timeout, Language: s.Influx.QueryLanguage})
			clients[s.ID] = c
		}
		if err != nil {
			closeClients(clients)
			return nil, fmt.Errorf("site %s: %w", s.ID, err)
		}
	}
	return clients, nil
}

func closeClients(clients map[string]*influx.Client) {
	for _, c := range clients {
		if c != nil {
			c.Close()
		}
	}
}

// Close releases the store and the clients.
func (j *job) Close() error {
	closeClients(j.clients)
	return j.st.Close()
}

// scanOptions bound one pass of the job.
type scanOptions struct {
	now      time.Time // evaluation time; zero: the newest sample (files) or the clock (InfluxDB)
	sinceNs  int64     // backfill: start here instead of at the checkpoint (0: checkpoint)
	untilNs  int64     // backfill: stop here (0: now minus the settle delay)
	progress func(done, total int, tank string)
	// reanalyse forgets every tank's fits, detector state and checkpoint
	// before the pass (maintenance and alert records are kept).
	reanalyse bool
	// final: the file histories are complete (scan --final): a drain
	// running into the end of a tank's data is fitted as a partial drain,
	// and drains within the settle delay of it are not held back. Also set
	// per tank when now was given and is past the tank's last sample by
	// more than the settle delay.
	final bool
	// newState: the state file may be created when missing (a first
	// run: --new-state or outputs.new_state).
	newState bool
}

// scanResult is what one pass of the job gave.
type scanResult struct {
	now      time.Time
	outcomes []scan.Outcome
	ingest   ingest.Report
	events   []alert.Event
	// writeBack is what the pass delivered from the outbox to InfluxDB
	// and what is still pending; notified the same for notifications.
	writeBack scan.Delivery
	notified  scan.Delivery
	// pass identifies the pass in the outbox (scan.QueuedEvent.Pass)
	pass int64
}

func (r *scanResult) fits() []model.Fit {
	var out []model.Fit
	for _, o := range r.outcomes {
		out = append(out, o.Fits...)
	}
	return out
}

func (r *scanResult) failed() []scan.Outcome {
	var out []scan.Outcome
	for _, o := range r.outcomes {
		if o.Err != nil {
			out = append(out, o)
		}
	}
	return out
}

// scan runs one pass: read, segment, fit, commit, detect, then the alert
// lifecycle. One failing tank is logged, counted and recorded; the others
// carry on.
func (j *job) scan(ctx context.Context, opt scanOptions) (*scanResult, error) {
	res := &scanResult{}
	if opt.reanalyse {
		for _, p := range j.plans {
			if err := j.st.DeleteTank(p.cfg.ID); err != nil && !errors.Is(err, store.ErrNotFound) {
				return res, err
			}
		}
	}
	var filePlans, influxTanks []*plan
	for _, p := range j.plans {
		if p.cfg.Source.Format == "influx" {
			influxTanks = append(influxTanks, p)
		} else {
			filePlans = append(filePlans, p)
		}
	}
	now := opt.now
	if now.IsZero() && len(influxTanks) > 0 {
		now = time.Now().UTC()
	}
	var mu sync.Mutex
	outcomes := make([]scan.Outcome, 0, len(j.plans))
	record := func(o scan.Outcome) {
		mu.Lock()
		outcomes = append(outcomes, o)
		done := len(outcomes)
		mu.Unlock()
		if o.Err != nil {
			j.log.Error("tank failed", "tank", o.Tank, "err", o.Err)
		}
		if opt.progress != nil {
			opt.progress(done, len(j.plans), o.Tank)
		}
	}
	limit := int64(math.MaxInt64)
	if !now.IsZero() {
		limit = now.UnixNano()
	}
	files := fileTanks(j.recv, filePlans)
	rep, newestNs := scan.ReadFiles(ctx, j.st, j.log, files, limit)
	var newest time.Time
	if newestNs != 0 {
		newest = time.Unix(0, newestNs).UTC()
	}
	res.ingest = rep
	if rep.Problems() > 0 {
		j.log.Warn("input problems", "count", rep.Problems(), "detail", strings.TrimSpace(rep.String()))
	}
	if now.IsZero() {
		// Files: evaluate at the newest sample of the plant.
		now = newest
		if now.IsZero() {
			now = time.Now().UTC()
		}
	}
	res.now = now
	for _, f := range files {
		record(f.Finish(now, opt.final || !opt.now.IsZero() && f.PastSettle(now)))
	}
	influxOuts, wb := j.scanInflux(ctx, influxTanks, now, opt)
	for _, o := range influxOuts {
		record(o)
	}
	res.writeBack = wb
	slices.SortFunc(outcomes, func(a, b scan.Outcome) int { return cmp.Compare(a.Tank, b.Tank) })
	res.outcomes = outcomes
	// The lifecycle runs even when the pass was interrupted: what was
	// committed and evaluated is reported.
	res.pass = time.Now().UnixNano()
	evs, err := scan.UpdateAlerts(j.st, outcomes, j.notifyPlan(now, res.pass))
	res.events = evs
	if err == nil && len(influxTanks) > 0 {
		// The transitions just queued for each site's InfluxDB, now
		// rather than with the next pass's write-back.
		fl := j.flushTransitions(ctx, influxTanks)
		res.writeBack.Add(fl)
		res.writeBack.Pending = fl.Pending
	}
	if ferr := scan.PutFeeds(j.st, outcomes); ferr != nil {
		err = errors.Join(err, ferr)
	}
	if cerr := ctx.Err(); cerr != nil {
		return res, cerr
	}
	return res, err
}

// fileTanks describes the file tanks plans for scan.ReadFiles: their
// sources from the config (a setting that does not parse fails the tank),
// and for a tank in cascade the receiving tank or level (from recv), its
// source and the outlet's height above its bottom.
func fileTanks(recv map[string]*plan, plans []*plan) []*scan.FileTank {
	out := make([]*scan.FileTank, 0, len(plans))
	for _, p := range plans {
		ft := &scan.FileTank{Plan: &p.Plan, Out: scan.Outcome{Tank: p.cfg.ID}}
		out = append(out, ft)
		var err error
		if ft.Src, err = fileSource(p); err != nil {
			ft.Out.Err = err
			continue
		}
		if into := p.cfg.Outlet.DischargesInto; into != "" {
			ft.Src.Into = into
			if rp := recv[into]; rp != nil {
				ft.Src.OutletAboveM = p.cfg.BaseElevationM + p.cfg.Outlet.ElevationM - rp.cfg.BaseElevationM
				rs, err := fileSource(rp)
				if err != nil {
					ft.Out.Err = fmt.Errorf("outlet.discharges_into %s: %w", into, err)
					continue
				}
				ft.Src.IntoSrc = &rs
			}
		}
	}
	return out
}

// fileSource is how a tank's (or level's) files are read.
func fileSource(p *plan) (scan.FileSource, error) {
	src := p.cfg.Source
	format, err := ingest.ParseFormat(src.Format)
	if err != nil {
		return scan.FileSource{}, err
	}
	prec, err := ingest.ParsePrecision(src.Precision)
	if err != nil {
		return scan.FileSource{}, err
	}
	fs := scan.FileSource{Paths: src.Paths, Format: format, Conv: p.conv,
		Read: ingest.ReadOptions{Precision: prec, Measurement: src.Measurement, Field: src.Field, TankTag: src.TankTag}}
	if p.cfg.Sensor.Inflow != nil {
		fs.Read.InflowField = p.cfg.Sensor.Inflow.Field
	}
	return fs, nil
}

// errTankFailures reports how many tanks failed in a pass.
func errTankFailures(failed []scan.Outcome) error {
	if len(failed) == 0 {
		return nil
	}
	errs := make([]error, len(failed))
	for i, o := range failed {
		errs[i] = fmt.Errorf("tank %s: %w", o.Tank, o.Err)
	}
	return fmt.Errorf("%d of the tanks failed: %w", len(failed), errors.Join(errs...))
}
