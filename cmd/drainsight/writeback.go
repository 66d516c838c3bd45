package main

import (
	"context"
	"sync"
	"time"

	"drainsight/ingest/influx"
	"drainsight/model"
	"drainsight/scan"
)

// influxSink writes a site's queued fits and findings to its InfluxDB.
type influxSink struct {
	c                      *influx.Client
	site                   string
	fitsMeas, findingsMeas string
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

// writeBackGrace is how long the end of a pass waits for a write-back
// attempt still under way before cutting it short (the item stays queued).
const writeBackGrace = 5 * time.Second

// writeBack delivers one site's outbox in the background during a pass:
// kick asks for a round (after each window's commits), finish runs a last
// round and returns what was delivered. After the first failure the sink
// rests until the next pass (its items keep their backoff).
type writeBack struct {
	name   string
	kicks  chan struct{}
	done   chan struct{}
	cancel context.CancelFunc
	mu     sync.Mutex
	total  scan.Delivery
}

func (j *job) startWriteBack(ctx context.Context, site string, sink scan.Sink, now time.Time) *writeBack {
	wb := &writeBack{name: "influx:" + site, kicks: make(chan struct{}, 1), done: make(chan struct{})}
	dctx, cancel := context.WithCancel(context.WithoutCancel(ctx))
	wb.cancel = cancel
	sender := &scan.Sender{Store: j.st, Log: j.log}
	go func() {
		defer close(wb.done)
		failed := false
		for range wb.kicks {
			if failed {
				continue
			}
			d, err := sender.Deliver(dctx, wb.name, scan.WriteBackTo(sink), now)
			if err != nil {
				j.log.Error("write-back outbox", "site", site, "err", err)
			}
			failed = d.Deferred > 0 || err != nil
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

// finish runs the last round, waits for it at most writeBackGrace and
// returns the pass's deliveries.
func (wb *writeBack) finish() scan.Delivery {
	wb.kick()
	close(wb.kicks)
	select {
	case <-wb.done:
	case <-time.After(writeBackGrace):
		wb.cancel()
		<-wb.done
	}
	wb.cancel()
	wb.mu.Lock()
	defer wb.mu.Unlock()
	return wb.total
}
