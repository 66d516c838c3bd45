package scan

import (
	"fmt"
	"slices"
	"time"

	"drainsight/alert"
	"drainsight/detect"
	"drainsight/store"
)

// UpdateAlerts runs the alert lifecycle over every evaluation of the pass
// in time order (tanks evaluated at the same instant together) and persists
// it: the lifecycle records of the outcomes' tanks are read from st, moved
// on and written back in one transaction, keyed by alert.IDOf. It returns
// every event of the pass: transitions through the replayed history and the
// state at the last evaluation. A failed tank contributes the evaluations
// made before it failed.
//
// The transitions to tell are queued for every sink of nt in the same
// transaction (kind OutboxAlert, id sink|Event.ID()): those of the pass's
// own evaluations and of the history within nt.Horizon of nt.Now, and
// every clear of a tank whose maintenance records changed, however old
// (a cleaning entered late still tells on-call staff). A Sender delivers
// them.
func UpdateAlerts(st *store.Store, outcomes []Outcome, nt Notify) ([]alert.Event, error) {
	var prev []alert.Record
	type slot struct {
		tanks    []string
		feedOnly []string // tanks whose data were missing: only their feed was evaluated
		findings []detect.Finding
	}
	slots := map[int64]*slot{}
	for _, o := range outcomes {
		recs, err := st.Alerts(o.Tank)
		if err != nil {
			return nil, err
		}
		for _, ar := range recs {
			var r alert.Record
			if err := DecodeGob(ar.Data, &r); err != nil {
				return nil, fmt.Errorf("tank %s: stored alert %s: %w", o.Tank, ar.Key, err)
			}
			prev = append(prev, r)
		}
		for _, ev := range o.Evals {
			sl := slots[ev.At.UnixNano()]
			if sl == nil {
				sl = &slot{}
				slots[ev.At.UnixNano()] = sl
			}
			if ev.Withheld {
				sl.feedOnly = append(sl.feedOnly, o.Tank)
			} else {
				sl.tanks = append(sl.tanks, o.Tank)
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
	reset := map[string]bool{}
	for _, o := range outcomes {
		if o.Reset && o.Err == nil {
			tr.ResetTank(o.Tank)
			reset[o.Tank] = true
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
		data, err := EncodeGob(r)
		if err != nil {
			return nil, err
		}
		put = append(put, store.AlertRecord{Key: storeKey(r.Finding), Data: data})
	}
	var del []store.AlertKey
	for _, r := range prev {
		if !keep[r.Key] {
			del = append(del, storeKey(r.Finding))
		}
	}
	var out []store.OutboxItem
	var hist []store.Transition
	horizon := nt.Horizon
	if horizon <= 0 {
		horizon = DefaultNotifyHorizon
	}
	for seq, e := range alert.Notifiable(evs) {
		data, err := EncodeGob(QueuedEvent{Pass: nt.Pass, Seq: seq, Event: e})
		if err != nil {
			return nil, err
		}
		// Every transition is kept for the tank's history (export).
		hd, err := EncodeGob(e)
		if err != nil {
			return nil, err
		}
		hist = append(hist, store.Transition{Tank: e.Finding.Tank, AtNs: e.At.UnixNano(), ID: e.ID(), Data: hd})
		item := func(sink string) store.OutboxItem {
			return store.OutboxItem{ID: sink + "|" + e.ID(), Sink: sink, Kind: OutboxAlert, Data: data, QueuedNs: time.Now().UnixNano()}
		}
		if nt.FileSink != "" {
			out = append(out, item(nt.FileSink)) // every transition, history included
		}
		if wb := nt.WriteBack[e.Finding.Tank]; wb != "" {
			out = append(out, item(wb)) // the tank's history in its InfluxDB
		}
		if e.At.Before(nt.Now.Add(-horizon)) && !(e.Status == alert.StatusCleared && reset[e.Finding.Tank]) {
			continue // older history: recorded in findings.jsonl, not sent
		}
		for _, sink := range nt.Sinks {
			out = append(out, item(sink))
		}
	}
	if err := st.UpdateAlerts(put, del, hist, out...); err != nil {
		return nil, err
	}
	return evs, nil
}

// Notify says where UpdateAlerts queues the transitions to tell.
type Notify struct {
	// Sinks are the outbox sinks, one per configured notifier.
	Sinks []string
	// FileSink, when set, receives every transition of the pass, history
	// included, for the findings file (SinkFindings): a pass killed before
	// it wrote the file leaves them for the next one.
	FileSink string
	// Pass identifies the pass (QueuedEvent.Pass).
	Pass int64
	// Horizon: a transition of the replayed history older than this
	// before Now is recorded but not sent (nobody can act on a day-old
	// page); 0 means DefaultNotifyHorizon.
	Horizon time.Duration
	// Now is the pass's evaluation time (the horizon's reference).
	Now time.Time
	// WriteBack maps a tank to its write-back sink (its site's InfluxDB):
	// every transition of the tank, history included, is queued there too.
	WriteBack map[string]string
}

// DefaultNotifyHorizon is how old a transition may be and still be sent.
const DefaultNotifyHorizon = 24 * time.Hour

// storeKey is the state file's key of a finding's lifecycle record: its
// alert.ID.
func storeKey(f detect.Finding) store.AlertKey { return store.AlertKey(alert.IDOf(f)) }

// QueuedEvent is the payload of an OutboxAlert item: the transition, the
// pass that queued it and its place in that pass's order.
type QueuedEvent struct {
	Pass  int64
	Seq   int
	Event alert.Event
}

// The outbox sinks of the output files: the fits of the events file and
// the transitions of the findings file, delivered when the file is written
// (and so made good by the next pass after a kill or a full disk).
const (
	SinkEvents   = "output:events"
	SinkFindings = "output:findings"
)
