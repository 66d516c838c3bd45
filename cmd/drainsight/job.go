package main

import (
	"cmp"
	"context"
	"encoding/json"
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
	"drainsight/detect"
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
	return &job{cfg: cfg, plans: plans, st: st, log: log, clients: clients, workers: 2}, nil
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
				influx.Options{QueryTimeout: s.Influx.Timeout, WriteTimeout: s.Influx.Timeout})
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

// tankOutcome is what one tank gave in one pass.
type tankOutcome struct {
	tank    string
	fits    []model.Fit
	evals   []scan.Evaluation // in time order; the last one is at the scan's now
	samples int64
	drains  int
	err     error
	// reset is set when maintenance records changed: the tank's findings
	// clear at once if absent.
	reset bool
	// gaps are the data gaps (stretches without samples longer than the
	// detection gap limit) that overlap this pass: the feed's status, shown
	// in the summary, never a finding.
	gaps []detect.Gap
	// seg counts what the segmenter saw and decided; falls lists each
	// fall; fitFailed counts drains whose fit failed.
	seg         model.SegmentStats
	falls       []model.Fall
	fitFailed   int
	fitFailedBy map[model.FitFailure]int
}

// feedRecord is one tank's feed at the end of a pass: one line of
// feeds.jsonl and the feed status kept in the state file (schema in the
// README). It is the data path's condition, never a tank finding.
type feedRecord struct {
	detect.FeedStatus
	// GapsInPass and LongestGapInPassS: the data gaps that overlap the pass
	// (since the tank's previous evaluation) and the longest of them, s.
	GapsInPass        int     `json:"gaps_in_pass"`
	LongestGapInPassS float64 `json:"longest_gap_in_pass_s"`
}

// feedRecord returns the tank's feed record; ok is false for a tank that
// failed or was not evaluated.
func (o *tankOutcome) feedRecord() (feedRecord, bool) {
	fs, ok := o.feed()
	if !ok || o.err != nil {
		return feedRecord{}, false
	}
	fs.SilentForS, fs.MissingShare24h, fs.SilentLimitS = sig(fs.SilentForS), sig(fs.MissingShare24h), sig(fs.SilentLimitS)
	r := feedRecord{FeedStatus: fs, GapsInPass: len(o.gaps)}
	for _, g := range o.gaps {
		r.LongestGapInPassS = max(r.LongestGapInPassS, time.Duration(g.EndNs-g.StartNs).Seconds())
	}
	r.LongestGapInPassS = sig(r.LongestGapInPassS)
	return r, true
}

// putFeeds stores each evaluated tank's feed record in the state file, for
// the report and status pages.
func (j *job) putFeeds(outcomes []tankOutcome) error {
	feeds := map[string][]byte{}
	for i := range outcomes {
		r, ok := outcomes[i].feedRecord()
		if !ok {
			continue
		}
		b, err := json.Marshal(r)
		if err != nil {
			return fmt.Errorf("tank %s: feed status: %w", outcomes[i].tank, err)
		}
		feeds[outcomes[i].tank] = b
	}
	if len(feeds) == 0 {
		return nil
	}
	return j.st.PutFeeds(feeds)
}

// feed returns the tank's feed status at the last evaluation.
func (o *tankOutcome) feed() (detect.FeedStatus, bool) {
	if len(o.evals) == 0 {
		return detect.FeedStatus{}, false
	}
	return o.evals[len(o.evals)-1].Feed, true
}

// scanResult is what one pass of the job gave.
type scanResult struct {
	now      time.Time
	outcomes []tankOutcome
	ingest   ingest.Report
	events   []alert.Event
}

func (r *scanResult) fits() []model.Fit {
	var out []model.Fit
	for _, o := range r.outcomes {
		out = append(out, o.fits...)
	}
	return out
}

func (r *scanResult) failed() []tankOutcome {
	var out []tankOutcome
	for _, o := range r.outcomes {
		if o.err != nil {
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
	outcomes := make([]tankOutcome, 0, len(j.plans))
	record := func(o tankOutcome) {
		mu.Lock()
		outcomes = append(outcomes, o)
		done := len(outcomes)
		mu.Unlock()
		if o.err != nil {
			j.log.Error("tank failed", "tank", o.tank, "err", o.err)
		}
		if opt.progress != nil {
			opt.progress(done, len(j.plans), o.tank)
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
	for _, o := range j.scanInflux(ctx, influxTanks, now, opt) {
		record(o)
	}
	slices.SortFunc(outcomes, func(a, b tankOutcome) int { return cmp.Compare(a.tank, b.tank) })
	res.outcomes = outcomes
	// The lifecycle runs even when the pass was interrupted: what was
	// committed and evaluated is reported.
	evs, err := j.updateAlerts(now, outcomes)
	res.events = evs
	if ferr := j.putFeeds(outcomes); ferr != nil {
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
	out tankOutcome
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
func (f *fileTank) finish(now time.Time, complete bool) tankOutcome {
	o := f.out
	if o.err != nil || f.run == nil {
		return o
	}
	f.run.Complete = complete
	o.fits, o.err = f.run.Commit(true, now.UnixNano())
	o.samples, o.drains, o.reset = f.run.Total, f.run.Drains, f.run.MaintChanged
	o.seg, o.falls, o.fitFailed, o.fitFailedBy = f.run.Seg.Stats(), f.run.Falls, f.run.FitErr, f.run.FitErrBy
	if o.err == nil {
		o.evals = append(f.run.Evals, scan.Evaluate(f.run.Det, now, f.run.P.Detect))
		o.gaps = f.run.Det.GapsBetween(time.Unix(0, f.run.PrevEvalNs), now)
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
		ft := &fileTank{p: p, out: tankOutcome{tank: p.cfg.ID}}
		all = append(all, ft)
		run, from, err := scan.Open(j.st, &p.Plan, j.log)
		if err != nil {
			ft.out.err = err
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
			byID[ft.out.tank] = ft
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
				ft.out.err = err
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
			ft.out.err = fmt.Errorf("outlet.discharges_into: no tank %q", a.Outlet.DischargesInto)
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
			ft.out.err = fmt.Errorf("the level of %s, which the outlet discharges into: %w", rp.cfg.ID, err)
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

// updateAlerts runs the alert lifecycle over every evaluation of the pass
// in time order (tanks evaluated at the same instant together) and persists
// it. It returns every event of the pass: transitions through the replayed
// history and the state at the last evaluation.
func (j *job) updateAlerts(now time.Time, outcomes []tankOutcome) ([]alert.Event, error) {
	var prev []alert.Record
	type slot struct {
		tanks    []string
		feedOnly []string // tanks whose data were missing: only their feed was evaluated
		findings []detect.Finding
	}
	slots := map[int64]*slot{}
	for _, o := range outcomes {
		recs, err := j.st.Alerts(o.tank)
		if err != nil {
			return nil, err
		}
		for _, ar := range recs {
			var r alert.Record
			if err := scan.DecodeGob(ar.Data, &r); err != nil {
				return nil, fmt.Errorf("tank %s: stored alert %s: %w", o.tank, ar.Key, err)
			}
			prev = append(prev, r)
		}
		// A failed tank contributes the evaluations made before it failed.
		for _, ev := range o.evals {
			sl := slots[ev.At.UnixNano()]
			if sl == nil {
				sl = &slot{}
				slots[ev.At.UnixNano()] = sl
			}
			if ev.Withheld {
				sl.feedOnly = append(sl.feedOnly, o.tank)
			} else {
				sl.tanks = append(sl.tanks, o.tank)
			}
			sl.findings = append(sl.findings, ev.Findings...)
		}
	}
	times := make([]int64, 0, len(slots))
	for t := range slots {
		times = append(times, t)
	}
	slices.Sort(times)
	tr := alert.NewTracker(prev)
	for _, o := range outcomes {
		if o.reset && o.err == nil {
			tr.ResetTank(o.tank)
		}
	}
	var evs []alert.Event
	for i, t := range times {
		e := tr.UpdateFeeds(time.Unix(0, t).UTC(), slots[t].tanks, slots[t].feedOnly, slots[t].findings)
		if i < len(times)-1 {
			e = alert.Notifiable(e) // history: transitions only
		}
		evs = append(evs, e...)
	}
	keep := map[string]bool{}
	var put []store.AlertRecord
	for _, r := range tr.Records() {
		keep[r.Key] = true
		data, err := scan.EncodeGob(r)
		if err != nil {
			return nil, err
		}
		put = append(put, store.AlertRecord{Key: alertKey(r.Finding), Data: data})
	}
	var del []store.AlertKey
	for _, r := range prev {
		if !keep[r.Key] {
			del = append(del, alertKey(r.Finding))
		}
	}
	if err := j.st.UpdateAlerts(put, del); err != nil {
		return nil, err
	}
	return evs, nil
}

func alertKey(f detect.Finding) store.AlertKey {
	// The same identity as alert.Key: outlet findings per kind, sensor
	// faults per subtype.
	k := store.AlertKey{Tank: f.Tank, Kind: f.Kind}
	if f.Kind == "sensor_fault" {
		k.Subtype = f.Subtype
	}
	return k
}

// errTankFailures reports how many tanks failed in a pass.
func errTankFailures(failed []tankOutcome) error {
	if len(failed) == 0 {
		return nil
	}
	errs := make([]error, len(failed))
	for i, o := range failed {
		errs[i] = fmt.Errorf("tank %s: %w", o.tank, o.err)
	}
	return fmt.Errorf("%d of the tanks failed: %w", len(failed), errors.Join(errs...))
}
