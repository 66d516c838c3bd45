package main

import (
	"context"
	"sync"
	"time"

	"drainsight/alert"
	"drainsight/config"
	"drainsight/ingest/influx"
	"drainsight/model"
	"drainsight/scan"
)

// influxSink writes a site's queued fits, findings and finding transitions
// to its InfluxDB.
type influxSink struct {
	c                                 *influx.Client
	site                              string
	fitsMeas, findingsMeas, transMeas string
}

// siteSink is the write-back sink of a site's InfluxDB through client c.
func siteSink(c *influx.Client, site string, ix *config.Influx) influxSink {
	return influxSink{c: c, site: site, fitsMeas: ix.FitsMeasurement, findingsMeas: ix.FindingsMeasurement, transMeas: ix.TransitionsMeasurement}
}

// WriteTransition writes one finding transition to the transitions
// measurement (tags tank, site, kind, subtype when there is one, and
// status new or cleared; the fields of the findings measurement and the
// transition's id), stamped at its time so that writing again overwrites.
func (s influxSink) WriteTransition(ctx context.Context, e alert.Event) error {
	d := e.Finding
	tags := map[string]string{"tank": d.Tank, "site": s.site, "kind": d.Kind, "status": string(e.Status)}
	if d.Subtype != "" {
		tags["subtype"] = d.Subtype
	}
	return s.c.WritePoints(ctx, []influx.Point{{
		Measurement: s.transMeas,
		Tags:        tags,
		Fields: map[string]float64{"magnitude_pct": d.MagnitudePct, "value": d.Value,
			"threshold": d.Threshold, "p_value": d.PValue},
		StringFields: map[string]string{"statistic": d.Statistic, "evidence": d.Evidence, "id": e.ID()},
		TimeNs:       e.At.UnixNano(),
	}})
}

func (s influxSink) WriteFits(ctx context.Context, fits []model.Fit) error {
	return s.c.WriteFits(ctx, s.fitsMeas, fits, s.site)
}

// WriteFindings writes the tank's active findings (tags tank, site, kind
// and, when there is one, subtype), stamped at f.AtNs so that writing
// again overwrites.
func (s influxSink) WriteFindings(ctx context.Context, f scan.FindingsAt) error {
	pts := make([]influx.Point, 0, len(f.Findings))
	for _, d := range f.Findings {
		tags := map[string]string{"tank": d.Tank, "site": s.site, "kind": d.Kind}
		if d.Subtype != "" {
			tags["subtype"] = d.Subtype
		}
		pts = append(pts, influx.Point{
			Measurement: s.findingsMeas,
			Tags:        tags,
			Fields: map[string]float64{"magnitude_pct": d.MagnitudePct, "value": d.Value,
				"threshold": d.Threshold, "p_value": d.PValue},
			StringFields: map[string]string{"statistic": d.Statistic, "evidence": d.Evidence},
			TimeNs:       f.AtNs,
		})
	}
	return s.c.WritePoints(ctx, pts)
}

// writeBack delivers one site's outbox in the background during a pass:
// kick asks for a round (after each window's commits), finish runs a last
// round and returns what was delivered. After a failure the sink rests for
// outputs.delivery.retry_min (its items keep their own backoff), so a
// refusing or unreachable server costs one failed attempt per rest (the
// write-back client tries twice within its timeout), and a server back
// from an outage gets the queue on the next round after the rest.
// Cancelling the pass stops the round; what was not delivered stays
// queued.
type writeBack struct {
	name  string
	kicks chan struct{}
	done  chan struct{}
	mu    sync.Mutex
	total scan.Delivery
}

func (j *job) startWriteBack(ctx context.Context, site string, sink scan.Sink) *writeBack {
	wb := &writeBack{name: "influx:" + site, kicks: make(chan struct{}, 1), done: make(chan struct{})}
	sender := j.sender()
	go func() {
		defer close(wb.done)
		var restUntil time.Time
		for range wb.kicks {
			if time.Now().Before(restUntil) {
				continue
			}
			d, err := sender.Deliver(ctx, wb.name, scan.WriteBackTo(sink), time.Now())
			if err != nil {
				j.log.Error("write-back outbox", "site", site, "err", err)
			}
			if d.Deferred > 0 || err != nil {
				restUntil = time.Now().Add(j.cfg.Outputs.Delivery.RetryMin)
			}
			wb.mu.Lock()
			pending := d.Pending
			wb.total.Add(d)
			wb.total.Pending = pending
			wb.mu.Unlock()
		}
	}()
	return wb
}

func (wb *writeBack) kick() {
	select {
	case wb.kicks <- struct{}{}:
	default: // a round is already asked for
	}
}

// finish runs the last round, waits for it and returns the pass's
// deliveries.
func (wb *writeBack) finish() scan.Delivery {
	wb.kick()
	close(wb.kicks)
	<-wb.done
	wb.mu.Lock()
	defer wb.mu.Unlock()
	return wb.total
}

// flushTransitions runs one write-back round for the sites of plans after
// the alert lifecycle queued their transitions. Pending is what stays
// queued for those sites.
func (j *job) flushTransitions(ctx context.Context, plans []*plan) scan.Delivery {
	var total scan.Delivery
	pending := 0
	seen := map[string]bool{}
	for _, p := range plans {
		site := p.cfg.Site
		if seen[site] {
			continue
		}
		seen[site] = true
		s, c := j.cfg.Site(site), j.clients[site]
		if s == nil || s.Influx == nil || c == nil {
			continue
		}
		wc, err := influx.New(c.Conn(), influx.Options{WriteTimeout: s.Influx.Timeout, Retry: influx.Retry{Attempts: 2}})
		if err != nil {
			j.log.Error("write-back of the transitions", "site", site, "err", err)
			continue
		}
		d, err := j.sender().Deliver(ctx, "influx:"+site, scan.WriteBackTo(siteSink(wc, site, s.Influx)), time.Now())
		wc.Close()
		if err != nil {
			j.log.Error("write-back outbox", "site", site, "err", err)
		}
		pending += d.Pending
		total.Add(d)
	}
	total.Pending = pending
	return total
}
