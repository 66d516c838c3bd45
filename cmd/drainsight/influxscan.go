package main

import (
	"context"
	"fmt"
	"math"
	"slices"
	"sync"
	"time"

	"drainsight/ingest/influx"
	"drainsight/model"
	"drainsight/scan"
)

// firstScanHistory is how far back a tank's first scan reads when it has no
// checkpoint; use backfill for more.
const firstScanHistory = 7 * 24 * time.Hour

// influxTank is one InfluxDB tank during a pass.
type influxTank struct {
	p      *plan
	run    *scan.Run
	lastNs int64 // newest sample pulled (the pull goroutine's own)
	// inflowM3s is the meter's last reading (NaN before the first).
	inflowM3s float64
	out       scan.Outcome
	failed    bool
	// outOfRange counts readings that are no level of the tank (the first
	// described in firstBad); they are logged, not analysed.
	outOfRange int
	firstBad   string
}

// pulledWindow is one window's samples per tank, or the error that stopped it.
type pulledWindow struct {
	wi   int
	w    [2]int64
	bufs map[string]*model.Series
	err  error
}

// scanInflux pulls each site's tanks window by window (one query per
// window), feeds the samples to the tanks' segmenters and commits each tank
// after every window, so an interrupted pass resumes where it stopped and a
// failed window leaves the checkpoints of its tanks untouched.
func (j *job) scanInflux(ctx context.Context, plans []*plan, now time.Time, opt scanOptions) ([]scan.Outcome, scan.Delivery) {
	bySite := map[string][]*plan{}
	var sites []string
	for _, p := range plans {
		if _, ok := bySite[p.cfg.Site]; !ok {
			sites = append(sites, p.cfg.Site)
		}
		bySite[p.cfg.Site] = append(bySite[p.cfg.Site], p)
	}
	var outs []scan.Outcome
	var wb scan.Delivery
	for _, site := range sites {
		o, d := j.scanSite(ctx, site, bySite[site], now, opt)
		outs = append(outs, o...)
		wb.Add(d)
	}
	return outs, wb
}

func (j *job) scanSite(ctx context.Context, siteID string, plans []*plan, now time.Time, opt scanOptions) ([]scan.Outcome, scan.Delivery) {
	site := j.cfg.Site(siteID)
	c := j.clients[siteID]
	fail := func(err error) ([]scan.Outcome, scan.Delivery) {
		outs := make([]scan.Outcome, len(plans))
		for i, p := range plans {
			outs[i] = scan.Outcome{Tank: p.cfg.ID, Err: err}
		}
		return outs, scan.Delivery{}
	}
	if site == nil || site.Influx == nil || c == nil {
		return fail(fmt.Errorf("site %q has no influx settings", siteID))
	}
	ix := site.Influx
	// Tanks with an inflow meter read its field beside the level (one field
	// name per site: the first metered tank's).
	inflowField := ""
	for _, p := range plans {
		if m := p.cfg.Sensor.Inflow; m != nil && p.conv.InflowToSI > 0 {
			if inflowField == "" {
				inflowField = m.Field
			} else if m.Field != inflowField {
				j.log.Warn("tanks of one site name different inflow fields; using the first", "site", siteID, "field", inflowField, "tank", p.cfg.ID)
			}
		}
	}
	spec := influx.SeriesSpec{Measurement: ix.Measurement, Field: ix.Field, TankTag: ix.TankTag, InflowField: inflowField}
	if ix.SiteTag != "" {
		spec.Tags = map[string]string{ix.SiteTag: siteID}
	}
	src, err := c.Source(spec)
	if err != nil {
		return fail(err)
	}
	untilNs := now.Add(-ix.SettleDelay).UnixNano()
	if opt.untilNs != 0 {
		untilNs = min(untilNs, opt.untilNs)
	}
	tanks := make([]*influxTank, 0, len(plans))
	byID := map[string]*influxTank{}
	startNs := int64(math.MaxInt64)
	var ids []string
	for _, p := range plans {
		run, from, err := scan.Open(j.st, &p.Plan, j.log)
		t := &influxTank{p: p, run: run, out: scan.Outcome{Tank: p.cfg.ID}, inflowM3s: math.NaN()}
		switch {
		case err != nil:
			t.out.Err, t.failed = err, true
		case !run.HadCheckpoint && opt.sinceNs != 0:
			from = opt.sinceNs
		case !run.HadCheckpoint:
			from = now.Add(-firstScanHistory).UnixNano()
		}
		if !t.failed {
			run.FromNs, run.LimitNs = from, now.UnixNano()
			startNs = min(startNs, from)
			ids = append(ids, p.cfg.ID)
			byID[p.cfg.ID] = t
		}
		tanks = append(tanks, t)
	}
	// A level that outlets of the site discharge into (a basin that is
	// not a monitored tank) is pulled in the same windows for the head
	// across them, never analysed: it is in byID, not in tanks.
	for _, t := range tanks {
		into := t.p.cfg.Outlet.DischargesInto
		if lp := j.recv[into]; into != "" && byID[into] == nil && lp != nil && j.cfg.Level(into) != nil {
			byID[into] = &influxTank{p: lp, out: scan.Outcome{Tank: into}, inflowM3s: math.NaN()}
			ids = append(ids, into)
		}
	}
	windows := influx.Windows(startNs, untilNs, ix.QueryWindow)
	// Write-back runs beside the analysis from the outbox the commits fill:
	// a server refusing writes delays neither the pull nor the fits.
	// Its client retries a write only once: the outbox retries across
	// rounds and passes, so a refusing server costs a round seconds, not
	// the client's full backoff.
	wc, err := influx.New(c.Conn(), influx.Options{WriteTimeout: ix.Timeout, Retry: influx.Retry{Attempts: 2}})
	if err != nil {
		return fail(err)
	}
	defer wc.Close()
	wb := j.startWriteBack(ctx, siteID, siteSink(wc, siteID, ix))

	// Pipeline: one goroutine pulls window after window (one query each)
	// while the tanks of the previous window are segmented, fitted and
	// committed, a few tanks at a time. At most three windows are in memory
	// (one being analysed, one queued, one being pulled).
	pctx, cancel := context.WithCancel(ctx)
	defer cancel()
	ch := make(chan pulledWindow, 1)
	pullIDs := slices.Clone(ids)
	go func() {
		defer close(ch)
		for wi, w := range windows {
			if len(pullIDs) == 0 || pctx.Err() != nil {
				return
			}
			pw := pulledWindow{wi: wi, w: w, bufs: make(map[string]*model.Series, len(pullIDs))}
			_, pw.err = src.PullWithInflow(pctx, pullIDs, w[0], w[1], func(tank string, tNs int64, v, q float64) {
				t := byID[tank]
				// Samples before the tank's own start are dropped by feed.
				if t == nil || tNs <= t.lastNs {
					return
				}
				h, bad := t.p.conv.Head(v)
				if bad != "" {
					t.outOfRange++
					if t.outOfRange == 1 {
						t.firstBad = fmt.Sprintf("%s at %s", bad, time.Unix(0, tNs).UTC().Format(time.RFC3339))
					}
					return
				}
				t.lastNs = tNs
				b := pw.bufs[tank]
				if b == nil {
					b = &model.Series{Tank: tank}
					pw.bufs[tank] = b
				}
				b.Append(tNs, h)
				if f := t.p.conv.InflowToSI; f > 0 {
					// Sample-and-hold of the meter, as for files.
					if !math.IsNaN(q) {
						t.inflowM3s = q * f
					}
					b.InflowM3s = append(b.InflowM3s, t.inflowM3s)
				}
			})
			select {
			case ch <- pw:
			case <-pctx.Done():
				return
			}
			if pw.err != nil {
				return
			}
		}
	}()
	sem := make(chan struct{}, max(1, j.workers))
	lastRecv := map[string]levelSample{} // each tank's last sample so far, for the tanks discharging into it
	for pw := range ch {
		w, wi := pw.w, pw.wi
		if pw.err != nil {
			// The window failed: nothing of it is committed; every tank of
			// the site keeps its checkpoint and reports the error.
			for _, t := range tanks {
				if !t.failed {
					t.out.Err, t.failed = fmt.Errorf("window %s: %w", time.Unix(0, w[0]).UTC().Format(time.RFC3339), pw.err), true
				}
			}
			cancel()
			break
		}
		linkWindow(tanks, byID, pw.bufs, lastRecv)
		final := wi == len(windows)-1
		var wg sync.WaitGroup
		for _, t := range tanks {
			if t.failed {
				continue
			}
			wg.Add(1)
			sem <- struct{}{}
			go func(t *influxTank, buf *model.Series) {
				defer wg.Done()
				defer func() { <-sem }()
				if buf != nil {
					t.run.Feed(buf)
				}
				fits, err := t.run.Commit(final, now.UnixNano())
				if err != nil {
					t.out.Err, t.failed = err, true
					return
				}
				t.out.Fits = append(t.out.Fits, fits...)
			}(t, pw.bufs[t.p.cfg.ID])
		}
		wg.Wait()
		wb.kick()
		if opt.progress != nil {
			opt.progress(wi+1, len(windows), siteID)
		}
	}
	for id, t := range byID {
		if t.run == nil && t.outOfRange > 0 && j.cfg.Level(id) != nil {
			j.log.Warn("readings out of the level's range, not used", "level", id, "count", t.outOfRange, "first", t.firstBad)
		}
	}
	outs := make([]scan.Outcome, 0, len(tanks))
	for _, t := range tanks {
		if t.outOfRange > 0 {
			j.log.Warn("readings out of the tank's range, not analysed", "tank", t.p.cfg.ID, "count", t.outOfRange, "first", t.firstBad)
		}
		t.out.Collect(t.run)
		if t.run != nil && t.out.Err != nil {
			t.out.Evals = t.run.Evals // evaluated before the failure
		}
		if t.out.Err == nil && t.run != nil {
			t.out.Finish(t.run, now)
			if ev := t.out.Evals[len(t.out.Evals)-1]; !ev.Withheld {
				// While the data are missing the findings are withheld:
				// what was written before stands, and a feed notice is the
				// data path's condition, not an outlet finding.
				if err := scan.QueueFindings(j.st, wb.name, t.run.Det, ev.Findings); err != nil {
					j.log.Warn("finding write-back not queued", "tank", t.p.cfg.ID, "err", err)
				}
			}
		}
		outs = append(outs, t.out)
	}
	return outs, wb.finish()
}

// levelSample is one reading of a tank's level above its bottom.
type levelSample struct {
	tNs    int64
	levelM float64
}

// linkWindow gives every tank of the window whose outlet discharges into
// another tank of the site that tank's level above the outlet
// (Series.SubmergedM), interpolated from its samples of the same window and
// the last one before it (lastRecv, updated here).
func linkWindow(tanks []*influxTank, byID map[string]*influxTank, bufs map[string]*model.Series, lastRecv map[string]levelSample) {
	for _, t := range tanks {
		into := t.p.cfg.Outlet.DischargesInto
		buf := bufs[t.p.cfg.ID]
		if t.failed || into == "" || buf == nil {
			continue
		}
		rt := byID[into]
		if rt == nil {
			t.out.Err, t.failed = fmt.Errorf("the level of %s, which the outlet discharges into, is not read in this pass", into), true
			continue
		}
		lv := model.ReceivingLevel{MaxGapNs: int64(scan.ReceiverMaxGap),
			OutletAboveM: t.p.cfg.BaseElevationM + t.p.cfg.Outlet.ElevationM - rt.p.cfg.BaseElevationM}
		if last, ok := lastRecv[into]; ok {
			lv.TimeNs, lv.LevelM = append(lv.TimeNs, last.tNs), append(lv.LevelM, last.levelM)
		}
		if rb := bufs[into]; rb != nil {
			for i, tn := range rb.TimeNs {
				lv.TimeNs = append(lv.TimeNs, tn)
				lv.LevelM = append(lv.LevelM, rb.HeadM[i]+rt.p.conv.OutletElevM)
			}
		}
		buf.SubmergedM = lv.At(buf.TimeNs)
	}
	for id, b := range bufs {
		if t := byID[id]; t != nil && b.Len() > 0 {
			n := b.Len() - 1
			lastRecv[id] = levelSample{b.TimeNs[n], b.HeadM[n] + t.p.conv.OutletElevM}
		}
	}
}
