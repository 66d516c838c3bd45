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
	cfg     *config.Config
	plans   []*plan
	st      *store.Store
	log     *slog.Logger
	clients map[string]*influx.Client // per site id, only sites with InfluxDB
	workers int
	// notifiers by outbox sink name (notify.go)
	notifiers map[string]alert.Notifier
}

// openJob loads nothing itself: it wires a loaded config into a job and
// opens the state store (with a lock timeout) and the InfluxDB clients.
func openJob(cfg *config.Config, statePath string, log *slog.Logger) (*job, error) {
	plans, err := buildPlans(cfg)
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
	st, err := openStore(statePath)
	if err != nil {
		closeClients(clients)
		return nil, err
	}
	return &job{cfg: cfg, plans: plans, st: st, log: log, clients: clients, workers: 2,
		notifiers: notifiers(cfg.Outputs.Alert, log)}, nil
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
	var fileTanks, influxTanks []*plan
	for _, p := range j.plans {
		if p.cfg.Source.Format == "influx" {
			influxTanks = append(influxTanks, p)
		} else {
			fileTanks = append(fileTanks, p)
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
	fileOuts, rep, newest := j.scanFiles(ctx, fileTanks, now)
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
	for _, f := range fileOuts {
		record(f.finish(now, opt.final || !opt.now.IsZero() && f.pastSettle(now)))
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
	if ferr := scan.PutFeeds(j.st, outcomes); ferr != nil {
		err = errors.Join(err, ferr)
	}
	if cerr := ctx.Err(); cerr != nil {
		return res, cerr
	}
	return res, err
}

// fileTank is one file tank during a pass.
type fileTank struct {
	p   *plan
	run *scan.Run
	out scan.Outcome
}

// pastSettle reports whether now is past the tank's last sample of this
// pass by more than its settle delay (no sample: false).
func (f *fileTank) pastSettle(now time.Time) bool {
	if f.run == nil || f.run.Total == 0 {
		return false
	}
	settle := f.run.P.Segment.Settle
	if settle == 0 {
		settle = model.DefaultSettle
	}
	return now.UnixNano()-f.run.LastNs > int64(max(settle, 0))
}

// finish commits the tank (unless it failed) and evaluates it at now; with
// complete set the tank's history is taken as complete.
func (f *fileTank) finish(now time.Time, complete bool) scan.Outcome {
	o := f.out
	if o.Err != nil || f.run == nil {
		return o
	}
	f.run.Complete = complete
	o.Fits, o.Err = f.run.Commit(true, now.UnixNano())
	o.Collect(f.run)
	if o.Err == nil {
		o.Finish(f.run, now)
	}
	return o
}

// fileChunk is how many samples of one tank the file reader hands on at a
// time: memory stays bounded whatever the length of the files.
const fileChunk = 1 << 15

// scanFiles reads every file source once, grouped by identical source
// settings, streaming each tank's samples into its run. It returns the tanks
// (not yet committed), the merged report and the time of the newest sample.
// A tank whose files fail to read is marked failed and nothing of it is
// committed.
func (j *job) scanFiles(ctx context.Context, plans []*plan, now time.Time) ([]*fileTank, ingest.Report, time.Time) {
	type group struct {
		src         config.Source
		inflowField string
		conv        map[string]ingest.Conversion
		tanks       []*fileTank
	}
	groups := map[string]*group{}
	var order []string
	var all []*fileTank
	limit := int64(math.MaxInt64)
	if !now.IsZero() {
		limit = now.UnixNano()
	}
	for _, p := range plans {
		ft := &fileTank{p: p, out: scan.Outcome{Tank: p.cfg.ID}}
		all = append(all, ft)
		run, from, err := scan.Open(j.st, &p.Plan, j.log)
		if err != nil {
			ft.out.Err = err
			continue
		}
		run.FromNs, run.LimitNs = from, limit
		ft.run = run
		s := p.cfg.Source
		inflowField := ""
		if p.cfg.Sensor.Inflow != nil {
			inflowField = p.cfg.Sensor.Inflow.Field
		}
		key := fmt.Sprintf("%s|%q|%s|%s|%s|%s|%s", s.Format, s.Paths, s.Measurement, s.Field, s.TankTag, s.Precision, inflowField)
		g, ok := groups[key]
		if !ok {
			g = &group{src: s, inflowField: inflowField, conv: map[string]ingest.Conversion{}}
			groups[key] = g
			order = append(order, key)
		}
		g.conv[p.cfg.ID] = p.conv
		g.tanks = append(g.tanks, ft)
	}
	var rep ingest.Report
	j.linkReceivers(ctx, all)
	var newest int64
	for _, key := range order {
		g := groups[key]
		byID := make(map[string]*fileTank, len(g.tanks))
		for _, ft := range g.tanks {
			byID[ft.out.Tank] = ft
		}
		format, err := ingest.ParseFormat(g.src.Format)
		if err == nil {
			var prec ingest.Precision
			prec, err = ingest.ParsePrecision(g.src.Precision)
			if err == nil {
				opt := ingest.ReadOptions{Precision: prec, Measurement: g.src.Measurement, Field: g.src.Field,
					TankTag: g.src.TankTag, InflowField: g.inflowField}
				var r ingest.Report
				r, err = ingest.StreamSeries(ctx, g.src.Paths, format, opt, g.conv, fileChunk, func(c *model.Series) {
					if n := c.Len(); n > 0 {
						newest = max(newest, c.TimeNs[n-1])
					}
					if ft := byID[c.Tank]; ft != nil {
						ft.run.Feed(c)
					}
				})
				rep.Merge(r)
			}
		}
		if err != nil {
			for _, ft := range g.tanks {
				ft.out.Err = err
			}
		}
	}
	var newestT time.Time
	if newest != 0 {
		newestT = time.Unix(0, newest).UTC()
	}
	return all, rep, newestT
}

// linkReceivers gives every tank whose outlet discharges into another tank
// that tank's level history, read once per receiving tank from its own
// files (level above its bottom), for the head across the outlet. A tank
// whose receiving level cannot be read fails (nothing of it is committed).
func (j *job) linkReceivers(ctx context.Context, tanks []*fileTank) {
	levels := map[string]*model.ReceivingLevel{}
	failed := map[string]error{}
	for _, ft := range tanks {
		if ft.run == nil || ft.p.cfg.Outlet.DischargesInto == "" {
			continue
		}
		a := ft.p.cfg
		var rp *plan
		for _, p := range j.plans {
			if p.cfg.ID == a.Outlet.DischargesInto {
				rp = p
			}
		}
		if rp == nil {
			ft.out.Err = fmt.Errorf("outlet.discharges_into: no tank %q", a.Outlet.DischargesInto)
			continue
		}
		lv, err := levels[rp.cfg.ID], failed[rp.cfg.ID]
		if lv == nil && err == nil {
			if lv, err = readReceiver(ctx, rp); err != nil {
				failed[rp.cfg.ID] = err
			} else {
				levels[rp.cfg.ID] = lv
			}
		}
		if err != nil {
			ft.out.Err = fmt.Errorf("the level of %s, which the outlet discharges into: %w", rp.cfg.ID, err)
			continue
		}
		r := *lv
		r.OutletAboveM = a.BaseElevationM + a.Outlet.ElevationM - rp.cfg.BaseElevationM
		ft.run.Recv = &r
	}
}

// readReceiver reads a receiving tank's level above its bottom from its
// files (their problems are reported by the receiving tank's own read).
func readReceiver(ctx context.Context, p *plan) (*model.ReceivingLevel, error) {
	src := p.cfg.Source
	format, err := ingest.ParseFormat(src.Format)
	if err != nil {
		return nil, err
	}
	prec, err := ingest.ParsePrecision(src.Precision)
	if err != nil {
		return nil, err
	}
	conv := p.conv
	conv.OutletElevM, conv.InflowToSI = 0, 0
	opt := ingest.ReadOptions{Precision: prec, Measurement: src.Measurement, Field: src.Field, TankTag: src.TankTag}
	all, _, err := ingest.ReadSeries(ctx, src.Paths, format, opt, map[string]ingest.Conversion{p.cfg.ID: conv})
	if err != nil {
		return nil, err
	}
	r := &model.ReceivingLevel{MaxGapNs: int64(receiverMaxGap)}
	if s := all[p.cfg.ID]; s != nil {
		r.TimeNs, r.LevelM = s.TimeNs, s.HeadM
		if n := s.Len(); n > 1 {
			dts := make([]int64, n-1)
			for i := range dts {
				dts[i] = s.TimeNs[i+1] - s.TimeNs[i]
			}
			slices.Sort(dts)
			r.MaxGapNs = max(r.MaxGapNs, 4*dts[len(dts)/2])
		}
	}
	return r, nil
}

// receiverMaxGap is the shortest interval of the receiving tank's samples
// not interpolated across (or four of its usual intervals, if longer).
const receiverMaxGap = 10 * time.Minute

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
