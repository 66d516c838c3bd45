package alert

import (
	"cmp"
	"slices"
	"time"

	"drainsight/detect"
)

// Status is where a finding is in its life.
type Status string

const (
	// StatusNew: first seen in this evaluation; notified.
	StatusNew Status = "new"
	// StatusOngoing: seen before and still present; not notified again.
	StatusOngoing Status = "ongoing"
	// StatusCleared: present before, absent in this evaluation of its tank; notified.
	StatusCleared Status = "cleared"
)

// Record is one finding's life, persisted between runs (JSON).
type Record struct {
	Key       string    `json:"key"`
	Status    Status    `json:"status"`
	FirstSeen time.Time `json:"first_seen"`
	LastSeen  time.Time `json:"last_seen"`
	ClearedAt time.Time `json:"cleared_at,omitzero"`
	// Missed counts the consecutive evaluations of its tank without it;
	// Checked is the time of the last evaluation of its tank, so that an
	// evaluation repeated at the same time counts once.
	Missed  int            `json:"missed,omitempty"`
	Checked time.Time      `json:"checked,omitzero"`
	Finding detect.Finding `json:"finding"`
}

// Event is a transition worth telling someone about, or an ongoing finding
// (Status tells which). Notifiers send only new and cleared events.
type Event struct {
	Status  Status
	At      time.Time
	Finding detect.Finding
}

// ID identifies a finding across runs: the one owner of an alert's
// identity (the state file keys its lifecycle records by it, receivers
// de-duplicate on it). Outlet findings are one per tank and kind: a
// restriction first called abrupt and later gradual is the same finding
// with a refined subtype, not a new alert. Sensor faults are one per
// subtype: a stuck reading and a drift are different problems.
type ID struct {
	Tank, Kind, Subtype string
}

// IDOf returns the identity of f.
func IDOf(f detect.Finding) ID {
	if f.Kind == detect.KindSensorFault {
		return ID{Tank: f.Tank, Kind: f.Kind, Subtype: f.Subtype}
	}
	return ID{Tank: f.Tank, Kind: f.Kind}
}

// String is the text form of the identity: "tank|kind", or
// "tank|kind|subtype" for a sensor fault (Record.Key).
func (id ID) String() string {
	if id.Kind == detect.KindSensorFault {
		return id.Tank + "|" + id.Kind + "|" + id.Subtype
	}
	return id.Tank + "|" + id.Kind
}

// ID is the stable id of one transition: the finding's identity, the
// status and the evaluation time ("tank|kind|new|2031-03-04T00:00:00Z").
// Every delivery attempt of the transition carries the same id.
func (e Event) ID() string {
	return IDOf(e.Finding).String() + "|" + string(e.Status) + "|" + e.At.UTC().Format(time.RFC3339)
}

// Key is IDOf(f).String().
func Key(f detect.Finding) string { return IDOf(f).String() }

// DefaultClearAfter is the number of consecutive evaluations a finding must
// be absent from before it is cleared: a statistic hovering at its limit
// would otherwise page on-call staff on every crossing.
const DefaultClearAfter = 3

// Tracker holds the lifecycle of every finding. It is not safe for
// concurrent use; the run loop owns one and persists its Records.
type Tracker struct {
	// ClearAfter is the number of consecutive evaluations without a finding
	// before it is cleared; 0 means DefaultClearAfter. Until then it stays
	// ongoing with its last evidence.
	ClearAfter int
	recs       map[string]*Record
	reset      map[string]bool
}

// NewTracker restores a tracker from persisted records.
func NewTracker(prev []Record) *Tracker {
	t := &Tracker{recs: make(map[string]*Record, len(prev)), reset: map[string]bool{}}
	for _, r := range prev {
		r := r
		t.recs[r.Key] = &r
	}
	return t
}

// ResetTank clears the tank's findings that are absent from its next
// evaluation at once, without waiting ClearAfter evaluations: maintenance
// restarted its baseline.
func (t *Tracker) ResetTank(tank string) { t.reset[tank] = true }

// Update applies one evaluation at now. evaluated lists the tanks whose
// findings were evaluated (a tank that failed to load keeps its findings
// untouched); findings are the active findings of those tanks. It returns the
// events of this evaluation sorted by tank, kind and subtype: new and cleared
// transitions and ongoing findings (including those absent for fewer than
// ClearAfter evaluations). Cleared records are dropped on the next Update, so
// a finding that comes back is new again.
func (t *Tracker) Update(now time.Time, evaluated []string, findings []detect.Finding) []Event {
	return t.UpdateFeeds(now, evaluated, nil, findings)
}

// UpdateFeeds is Update where the tanks in feedOnly had only their feed
// evaluated: their data are missing, so their other findings are withheld
// (kept as they are, neither ongoing nor missed), while their feed notice
// (kind detect.KindFeed) is raised or kept. A feed notice clears at the
// first evaluation without it: the data are back.
func (t *Tracker) UpdateFeeds(now time.Time, evaluated, feedOnly []string, findings []detect.Finding) []Event {
	inScope := make(map[string]bool, len(evaluated))
	for _, tank := range evaluated {
		inScope[tank] = true
	}
	feedScope := make(map[string]bool, len(feedOnly))
	for _, tank := range feedOnly {
		feedScope[tank] = true
	}
	seen := make(map[string]bool, len(findings))
	var evs []Event
	for _, f := range findings {
		k := Key(f)
		if seen[k] {
			continue
		}
		seen[k] = true
		r, ok := t.recs[k]
		if !ok || r.Status == StatusCleared {
			r = &Record{Key: k, Status: StatusNew, FirstSeen: now}
			t.recs[k] = r
		} else {
			r.Status = StatusOngoing
		}
		r.LastSeen, r.Finding, r.Missed, r.Checked = now, f, 0, now
		evs = append(evs, Event{Status: r.Status, At: now, Finding: f})
	}
	clearAfter := t.ClearAfter
	if clearAfter <= 0 {
		clearAfter = DefaultClearAfter
	}
	for k, r := range t.recs {
		isFeed := r.Finding.Kind == detect.KindFeed
		if seen[k] || !(inScope[r.Finding.Tank] || isFeed && feedScope[r.Finding.Tank]) {
			continue
		}
		if r.Status == StatusCleared {
			delete(t.recs, k)
			continue
		}
		if now.After(r.Checked) {
			r.Missed++
			r.Checked = now
		}
		if r.Missed < clearAfter && !t.reset[r.Finding.Tank] && !isFeed {
			r.Status = StatusOngoing
			evs = append(evs, Event{Status: StatusOngoing, At: now, Finding: r.Finding})
			continue
		}
		r.Status, r.ClearedAt = StatusCleared, now
		evs = append(evs, Event{Status: StatusCleared, At: now, Finding: r.Finding})
	}
	for _, tank := range evaluated {
		delete(t.reset, tank)
	}
	slices.SortFunc(evs, func(a, b Event) int {
		return cmp.Or(cmp.Compare(a.Finding.Tank, b.Finding.Tank),
			cmp.Compare(a.Finding.Kind, b.Finding.Kind), cmp.Compare(a.Finding.Subtype, b.Finding.Subtype))
	})
	return evs
}

// Records returns the persisted form, sorted by key.
func (t *Tracker) Records() []Record {
	out := make([]Record, 0, len(t.recs))
	for _, r := range t.recs {
		out = append(out, *r)
	}
	slices.SortFunc(out, func(a, b Record) int { return cmp.Compare(a.Key, b.Key) })
	return out
}

// Active returns the findings that are new or ongoing, sorted by key.
func (t *Tracker) Active() []Record {
	var out []Record
	for _, r := range t.Records() {
		if r.Status != StatusCleared {
			out = append(out, r)
		}
	}
	return out
}
