package scan_test

import (
	"context"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"drainsight/alert"
	"drainsight/detect"
	"drainsight/scan"
	"drainsight/store"
)

// The alert lifecycle across passes, through the state file: a finding is
// new once, ongoing while it stays, cleared after alert.DefaultClearAfter
// evaluations without it (one evaluation of a restriction at the limit
// must not page twice), and a maintenance record clears it at once. The
// lifecycle rules are the project's own (alert/lifecycle.go); the counts
// checked here follow from them.
func TestUpdateAlertsAcrossPasses(t *testing.T) {
	st, err := store.Open(filepath.Join(t.TempDir(), "state.db"), time.Second)
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	day := time.Date(2031, 3, 1, 0, 0, 0, 0, time.UTC)
	block := detect.Finding{Tank: "B2", Kind: detect.KindRestriction, Subtype: "abrupt", MagnitudePct: -31}
	stuck := detect.Finding{Tank: "B2", Kind: detect.KindSensorFault, Subtype: detect.SubStuck}
	pass := func(d int, reset bool, fs ...detect.Finding) []alert.Event {
		t.Helper()
		at := day.Add(time.Duration(d) * 24 * time.Hour)
		for i := range fs {
			fs[i].DetectedAt = at
		}
		o := scan.Outcome{Tank: "B2", Reset: reset, Evals: []scan.Evaluation{{At: at, Findings: fs}}}
		evs, err := scan.UpdateAlerts(st, []scan.Outcome{o}, scan.Notify{})
		if err != nil {
			t.Fatal(err)
		}
		return evs
	}
	status := func(evs []alert.Event) map[string]alert.Status {
		m := map[string]alert.Status{}
		for _, e := range evs {
			m[alert.Key(e.Finding)] = e.Status
		}
		return m
	}
	bk, sk := alert.Key(block), alert.Key(stuck)
	steps := []struct {
		name  string
		reset bool
		fs    []detect.Finding
		want  map[string]alert.Status
	}{
		{"both appear", false, []detect.Finding{block, stuck}, map[string]alert.Status{bk: alert.StatusNew, sk: alert.StatusNew}},
		{"both stay", false, []detect.Finding{block, stuck}, map[string]alert.Status{bk: alert.StatusOngoing, sk: alert.StatusOngoing}},
		{"stuck gone once", false, []detect.Finding{block}, map[string]alert.Status{bk: alert.StatusOngoing, sk: alert.StatusOngoing}},
		{"stuck gone twice", false, []detect.Finding{block}, map[string]alert.Status{bk: alert.StatusOngoing, sk: alert.StatusOngoing}},
		{"stuck gone three times", false, []detect.Finding{block}, map[string]alert.Status{bk: alert.StatusOngoing, sk: alert.StatusCleared}},
		{"stuck back", false, []detect.Finding{block, stuck}, map[string]alert.Status{bk: alert.StatusOngoing, sk: alert.StatusNew}},
		{"outlet cleaned", true, []detect.Finding{stuck}, map[string]alert.Status{bk: alert.StatusCleared, sk: alert.StatusOngoing}},
		{"nothing left", false, nil, map[string]alert.Status{sk: alert.StatusOngoing}},
	}
	for d, s := range steps {
		got := status(pass(d, s.reset, s.fs...))
		for k, w := range s.want {
			if got[k] != w {
				t.Errorf("day %d (%s): %s is %q, want %q (all: %v)", d, s.name, k, got[k], w, got)
			}
		}
		for k := range got {
			if _, ok := s.want[k]; !ok {
				t.Errorf("day %d (%s): unexpected event for %s: %q", d, s.name, k, got[k])
			}
		}
	}
	// The records are keyed by alert.IDOf in the state file: one per
	// finding identity, the cleared restriction gone.
	recs, err := st.Alerts("B2")
	if err != nil {
		t.Fatal(err)
	}
	if len(recs) != 1 || recs[0].Key != store.AlertKey(alert.IDOf(stuck)) {
		t.Errorf("stored records %v, want only the stuck reading's", recs)
	}
}

// Evaluations of the replayed history are told as transitions only (a
// second tank evaluated at the first instant with nothing to tell adds
// nothing).
func TestUpdateAlertsHistoryTransitionsOnly(t *testing.T) {
	st, err := store.Open(filepath.Join(t.TempDir(), "state.db"), time.Second)
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	d0 := time.Date(2031, 3, 1, 0, 0, 0, 0, time.UTC)
	leak := detect.Finding{Tank: "C1", Kind: detect.KindTankLeak}
	var evs []scan.Evaluation
	for d := range 4 {
		evs = append(evs, scan.Evaluation{At: d0.Add(time.Duration(d) * 24 * time.Hour), Findings: []detect.Finding{leak}})
	}
	got, err := scan.UpdateAlerts(st, []scan.Outcome{{Tank: "C1", Evals: evs}, {Tank: "C2", Evals: []scan.Evaluation{{At: d0}}}}, scan.Notify{})
	if err != nil {
		t.Fatal(err)
	}
	// day 0 new (a transition), days 1-2 ongoing (history: not told), day 3
	// ongoing (the pass's own time: told)
	if len(got) != 2 || got[0].Status != alert.StatusNew || got[1].Status != alert.StatusOngoing || !got[1].At.Equal(evs[3].At) {
		t.Errorf("events %+v, want new at day 0 and ongoing at day 3", got)
	}
}

// The transitions to tell are queued with the lifecycle records: the
// pass's own, none of the replayed history older than the horizon, but a
// clear caused by a maintenance record entered late however old it is.
func TestUpdateAlertsQueuesNotifications(t *testing.T) {
	st, err := store.Open(filepath.Join(t.TempDir(), "state.db"), time.Second)
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	d0 := time.Date(2031, 3, 1, 0, 0, 0, 0, time.UTC)
	day := func(n int) time.Time { return d0.Add(time.Duration(n) * 24 * time.Hour) }
	block := detect.Finding{Tank: "S4", Kind: detect.KindRestriction}
	old := detect.Finding{Tank: "S5", Kind: detect.KindTankLeak}
	nt := scan.Notify{Sinks: []string{"notify:a", "notify:b"}, Now: day(3), WriteBack: map[string]string{"S4": "influx:w"}}
	// S4: new on day 1 (history, 2 days old: not told) and still there on
	// day 3; S5: new on day 3 (told)
	_, err = scan.UpdateAlerts(st, []scan.Outcome{
		{Tank: "S4", Evals: []scan.Evaluation{{At: day(1), Findings: []detect.Finding{block}}, {At: day(3), Findings: []detect.Finding{block}}}},
		{Tank: "S5", Evals: []scan.Evaluation{{At: day(3), Findings: []detect.Finding{old}}}},
	}, nt)
	if err != nil {
		t.Fatal(err)
	}
	q, _ := st.Pending("notify:a")
	if len(q) != 1 || !strings.Contains(q[0].ID, "S5|tank_leak|new|") {
		t.Fatalf("queued %v, want only S5's new leak", ids(q))
	}
	if qb, _ := st.Pending("notify:b"); len(qb) != 1 {
		t.Errorf("second notifier: %d queued, want 1", len(qb))
	}
	// S4's write-back gets its history too (the day-1 transition), and
	// the store keeps every transition for export.
	qw, _ := st.Pending("influx:w")
	if len(qw) != 1 || !strings.Contains(qw[0].ID, "S4|restriction|new|2031-03-02") {
		t.Errorf("write-back queue %v, want S4's new restriction of day 1", ids(qw))
	}
	sink := &fakeSink{fits: map[int64]int{}}
	snd := &scan.Sender{Store: st}
	if d, err := snd.Deliver(context.Background(), "influx:w", scan.WriteBackTo(sink), time.Now()); err != nil || d.Delivered != 1 || len(sink.trans) != 1 {
		t.Errorf("write-back of the transition: %+v %v, sink got %v", d, err, sink.trans)
	}
	if hist, err := st.Transitions("", 0, 1<<62); err != nil || len(hist) != 2 {
		t.Errorf("stored transitions: %d, %v; want S4's and S5's new", len(hist), err)
	}
	st.Delivered(q...)
	// a cleaning of S4 recorded late: the replay from day 2 clears the
	// restriction at day 2, four days before now, and that is told
	_, err = scan.UpdateAlerts(st, []scan.Outcome{{Tank: "S4", Reset: true, Evals: []scan.Evaluation{{At: day(2)}, {At: day(6)}}}},
		scan.Notify{Sinks: []string{"notify:a"}, Now: day(6)})
	if err != nil {
		t.Fatal(err)
	}
	q, _ = st.Pending("notify:a")
	if len(q) != 1 || !strings.Contains(q[0].ID, "S4|restriction|cleared|") {
		t.Errorf("queued %v after the late maintenance record, want S4's clear", ids(q))
	}
}

func ids(items []store.OutboxItem) []string {
	var out []string
	for _, it := range items {
		out = append(out, it.ID)
	}
	return out
}
