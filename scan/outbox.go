package scan

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"time"

	"drainsight/alert"
	"drainsight/detect"
	"drainsight/model"
	"drainsight/store"
)

// The kinds of outbox item this package queues and delivers. Queue times,
// backoff and expiry are wall-clock times (time.Now), never the pass's
// evaluation time, which for files is the data's.
const (
	// OutboxFits holds a commit's drain fits ([]model.Fit, gob): queued in
	// the commit's own transaction when Plan.WriteBack names a sink.
	OutboxFits = "fits"
	// OutboxFindings holds a tank's active findings at one evaluation
	// (FindingsAt, gob); one item per tank, each pass's replacing the last.
	OutboxFindings = "findings"
	// OutboxAlert holds one alert transition to notify (QueuedEvent,
	// gob), queued per notifier with the lifecycle records that made it.
	OutboxAlert = "alert"
)

// FindingsAt is the payload of an OutboxFindings item: the tank's active
// findings, stamped at AtNs (the end of its last drain, or its last
// sample) so that writing them again overwrites.
type FindingsAt struct {
	Tank     string
	AtNs     int64
	Findings []detect.Finding
}

// fitsItem is the outbox item of one commit's fits: its ID is the tank and
// the span of the fits' ends, so committing the same fits again (a
// re-analysis, a resumed pass) replaces it instead of queueing a repeat.
func fitsItem(sink, tank string, fits []model.Fit) (store.OutboxItem, error) {
	data, err := EncodeGob(fits)
	if err != nil {
		return store.OutboxItem{}, err
	}
	return store.OutboxItem{
		ID:   fmt.Sprintf("%s|%s|%s|%d-%d", sink, OutboxFits, tank, fits[0].EndNs, fits[len(fits)-1].EndNs),
		Sink: sink, Kind: OutboxFits, Data: data, QueuedNs: time.Now().UnixNano(),
	}, nil
}

// QueueFindings queues the tank's active findings for sink, replacing
// the ones queued before and not yet delivered. Nothing is queued with no
// findings or without a time to stamp them at (det has neither a fit nor a
// sample).
func QueueFindings(st *store.Store, sink string, det *detect.State, fs []detect.Finding) error {
	if len(fs) == 0 {
		return nil
	}
	at := det.LastFitNs
	if at == 0 {
		at = det.Sensor.LastSampleNs // a tank with no drain yet (a dead feed, say)
	}
	if at == 0 {
		return nil
	}
	data, err := EncodeGob(FindingsAt{Tank: det.Tank, AtNs: at, Findings: fs})
	if err != nil {
		return err
	}
	return st.Enqueue(store.OutboxItem{
		ID:   fmt.Sprintf("%s|%s|%s", sink, OutboxFindings, det.Tank),
		Sink: sink, Kind: OutboxFindings, Data: data, QueuedNs: time.Now().UnixNano(),
	})
}

// Sink receives the queued write-back of one destination (a site's
// InfluxDB). Writing the same item twice must be harmless: the points
// written carry stable series and times, so a repeat overwrites.
type Sink interface {
	WriteFits(ctx context.Context, fits []model.Fit) error
	WriteFindings(ctx context.Context, f FindingsAt) error
	// WriteTransition writes one finding transition (new or cleared),
	// stamped at its time.
	WriteTransition(ctx context.Context, e alert.Event) error
}

// Destination sends one queued item; the Sender calls it.
type Destination interface {
	Send(ctx context.Context, it store.OutboxItem) error
}

// WriteBackTo is the Destination of a write-back Sink (items OutboxFits,
// OutboxFindings and the OutboxAlert transitions queued for it).
func WriteBackTo(s Sink) Destination { return writeBackDest{s} }

// NotifyTo is the Destination of a notifier (items OutboxAlert, one
// transition each).
func NotifyTo(n alert.Notifier) Destination { return notifyDest{n} }

type writeBackDest struct{ s Sink }

func (d writeBackDest) Send(ctx context.Context, it store.OutboxItem) error {
	switch it.Kind {
	case OutboxFits:
		var fits []model.Fit
		if err := DecodeGob(it.Data, &fits); err != nil {
			return fmt.Errorf("outbox item %s: %w", it.ID, err)
		}
		return d.s.WriteFits(ctx, fits)
	case OutboxFindings:
		var f FindingsAt
		if err := DecodeGob(it.Data, &f); err != nil {
			return fmt.Errorf("outbox item %s: %w", it.ID, err)
		}
		return d.s.WriteFindings(ctx, f)
	case OutboxAlert:
		var q QueuedEvent
		if err := DecodeGob(it.Data, &q); err != nil {
			return fmt.Errorf("outbox item %s: %w", it.ID, err)
		}
		return d.s.WriteTransition(ctx, q.Event)
	}
	return fmt.Errorf("outbox item %s: kind %q is not a write-back", it.ID, it.Kind)
}

type notifyDest struct{ n alert.Notifier }

// BatchDestination sends every due item of a round at once (a mail with
// all the transitions in it): all are delivered, or all wait for their
// retry.
type BatchDestination interface {
	Destination
	SendAll(ctx context.Context, items []store.OutboxItem) error
}

// NotifyGroupedTo is the Destination of a notifier that tells all the
// transitions of a round in one go (mail): one Notify call per round.
func NotifyGroupedTo(n alert.Notifier) BatchDestination { return groupedDest{notifyDest{n}} }

type groupedDest struct{ notifyDest }

func (d groupedDest) SendAll(ctx context.Context, items []store.OutboxItem) error {
	evs := make([]alert.Event, 0, len(items))
	for _, it := range items {
		if it.Kind != OutboxAlert {
			return fmt.Errorf("outbox item %s: kind %q is not a notification", it.ID, it.Kind)
		}
		var q QueuedEvent
		if err := DecodeGob(it.Data, &q); err != nil {
			return fmt.Errorf("outbox item %s: %w", it.ID, err)
		}
		evs = append(evs, q.Event)
	}
	return d.n.Notify(ctx, evs)
}

func (d notifyDest) Send(ctx context.Context, it store.OutboxItem) error {
	if it.Kind != OutboxAlert {
		return fmt.Errorf("outbox item %s: kind %q is not a notification", it.ID, it.Kind)
	}
	var q QueuedEvent
	if err := DecodeGob(it.Data, &q); err != nil {
		return fmt.Errorf("outbox item %s: %w", it.ID, err)
	}
	return d.n.Notify(ctx, []alert.Event{q.Event})
}

// Sender drains the outbox of the state file into sinks.
type Sender struct {
	Store *store.Store
	Log   *slog.Logger
	// MaxAge is how long an item may wait before it expires (logged,
	// counted and dropped); 0 means DefaultOutboxMaxAge.
	MaxAge time.Duration
	// Backoff is the wait before the next attempt after the n-th failure
	// of an item (n = 1, 2, ...); nil means DefaultBackoff.
	Backoff func(n int) time.Duration
}

// DefaultOutboxMaxAge is how long an undelivered item is kept.
const DefaultOutboxMaxAge = 30 * 24 * time.Hour

// DefaultBackoff waits 1 min after the first failure, doubling to at most
// 1 h: a sink down for a day is tried about 30 times.
func DefaultBackoff(n int) time.Duration { return Backoff(time.Minute, time.Hour)(n) }

// Backoff waits lo after the first failure, doubling to at most hi.
func Backoff(lo, hi time.Duration) func(n int) time.Duration {
	return func(n int) time.Duration {
		d := lo
		for i := 1; i < n && d < hi; i++ {
			d *= 2
		}
		return min(d, hi)
	}
}

// Delivery counts what one delivery round did.
type Delivery struct {
	Delivered int // items written
	Deferred  int // items that failed this round and wait for a retry
	Expired   int // items dropped after MaxAge
	Pending   int // items still queued for the sink after the round
	// LastError is the first failure of the round ("" when none).
	LastError string
}

// Add sums two rounds.
func (d *Delivery) Add(e Delivery) {
	d.Delivered += e.Delivered
	d.Deferred += e.Deferred
	d.Expired += e.Expired
	d.Pending += e.Pending
	if d.LastError == "" {
		d.LastError = e.LastError
	}
}

// Deliver sends the due items of sink oldest first until the queue is
// empty or an item fails (now is the wall clock, as the queue times are): a failure means the destination is down or
// refusing, so the item waits for its backoff and the rest wait for the
// next round (on this run or a later one). Expired items are dropped
// first. The error is the store's, never the sink's (a sink failure is
// counted in the Delivery).
func (s *Sender) Deliver(ctx context.Context, name string, to Destination, now time.Time) (Delivery, error) {
	var d Delivery
	items, err := s.Store.Pending(name)
	if err != nil {
		return d, err
	}
	maxAge := s.MaxAge
	if maxAge <= 0 {
		maxAge = DefaultOutboxMaxAge
	}
	backoff := s.Backoff
	if backoff == nil {
		backoff = DefaultBackoff
	}
	nowNs := now.UnixNano()
	var expired []store.OutboxItem
	for _, it := range items {
		if nowNs-it.QueuedNs > int64(maxAge) {
			expired = append(expired, it)
			s.log().Error("outbox item expired undelivered", "sink", name, "item", it.ID,
				"queued", time.Unix(0, it.QueuedNs).UTC(), "attempts", it.Attempts, "last_error", it.LastError)
		}
	}
	if len(expired) > 0 {
		if err := s.Store.Delivered(expired...); err != nil {
			return d, err
		}
		d.Expired = len(expired)
	}
	left := len(items) - len(expired)
	if b, ok := to.(BatchDestination); ok {
		var due []store.OutboxItem
		for _, it := range items {
			if nowNs-it.QueuedNs <= int64(maxAge) && it.NextNs <= nowNs {
				due = append(due, it)
			}
		}
		if len(due) == 0 || ctx.Err() != nil {
			d.Pending = left
			return d, nil
		}
		if err := b.SendAll(ctx, due); err != nil {
			if ctx.Err() == nil {
				d.Deferred, d.LastError = len(due), err.Error()
				s.log().Warn("delivery deferred", "sink", name, "items", len(due), "err", err)
				for _, it := range due {
					if derr := s.Store.Deferred(it.ID, nowNs+int64(backoff(it.Attempts+1)), err.Error()); derr != nil && !errors.Is(derr, store.ErrNotQueued) {
						return d, derr
					}
				}
			}
			d.Pending = left
			return d, nil
		}
		if err := s.Store.Delivered(due...); err != nil {
			return d, err
		}
		d.Delivered, d.Pending = len(due), left-len(due)
		return d, nil
	}
	for _, it := range items {
		if nowNs-it.QueuedNs > int64(maxAge) {
			continue
		}
		if it.NextNs > nowNs || ctx.Err() != nil {
			continue
		}
		if err := to.Send(ctx, it); err != nil {
			if ctx.Err() != nil {
				break // cut short by the caller: not the item's failure
			}
			d.Deferred++
			d.LastError = err.Error()
			s.log().Warn("delivery deferred", "sink", name, "item", it.ID, "attempt", it.Attempts+1, "err", err)
			if derr := s.Store.Deferred(it.ID, nowNs+int64(backoff(it.Attempts+1)), err.Error()); derr != nil && !errors.Is(derr, store.ErrNotQueued) {
				return d, derr
			}
			break
		}
		if err := s.Store.Delivered(it); err != nil {
			return d, err
		}
		d.Delivered++
		left--
	}
	d.Pending = left
	return d, nil
}

func (s *Sender) log() *slog.Logger {
	if s.Log == nil {
		return slog.New(slog.DiscardHandler)
	}
	return s.Log
}
