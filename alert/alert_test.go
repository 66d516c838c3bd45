package alert

import (
	"bytes"
	"context"
	"encoding/json"
	"flag"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"strings"
	"sync/atomic"
	"testing"
	"time"

	"drainsight/detect"
)

var update = flag.Bool("update", false, "rewrite golden files")

var t0 = time.Date(2026, 3, 2, 6, 0, 0, 0, time.UTC)

func finding(tank, kind, sub string, mag float64) detect.Finding {
	return detect.Finding{Tank: tank, Kind: kind, Subtype: sub, MagnitudePct: mag,
		Onset: t0.Add(-72 * time.Hour), Statistic: "cusum", Evidence: "K " + kind}
}

func statuses(evs []Event) string {
	var parts []string
	for _, e := range evs {
		parts = append(parts, Key(e.Finding)+"="+string(e.Status))
	}
	return strings.Join(parts, " ")
}

func TestTrackerLifecycle(t *testing.T) {
	restr := finding("T1", "restriction", "gradual", -22)
	leak := finding("T2", "tank_leak", "", 0)
	both := []string{"T1", "T2"}
	steps := []struct {
		name      string
		evaluated []string
		findings  []detect.Finding
		reset     string
		want      string
		notify    int
	}{
		{"first sight is new", both, []detect.Finding{restr}, "", "T1|restriction=new", 1},
		{"same data again is not re-notified", both, []detect.Finding{restr}, "", "T1|restriction=ongoing", 0},
		{"a second tank joins", both, []detect.Finding{restr, leak}, "", "T1|restriction=ongoing T2|tank_leak=new", 1},
		{"tank not evaluated keeps its finding", []string{"T1"}, []detect.Finding{restr}, "", "T1|restriction=ongoing", 0},
		{"absent once: held", both, []detect.Finding{restr}, "", "T1|restriction=ongoing T2|tank_leak=ongoing", 0},
		{"back before clearing: still ongoing, not new", both, []detect.Finding{restr, leak}, "", "T1|restriction=ongoing T2|tank_leak=ongoing", 0},
		{"absent 1", both, []detect.Finding{restr}, "", "T1|restriction=ongoing T2|tank_leak=ongoing", 0},
		{"absent 2", both, []detect.Finding{restr}, "", "T1|restriction=ongoing T2|tank_leak=ongoing", 0},
		{"absent 3: cleared", both, []detect.Finding{restr}, "", "T1|restriction=ongoing T2|tank_leak=cleared", 1},
		{"cleared record dropped, comes back new", both, []detect.Finding{restr, leak}, "", "T1|restriction=ongoing T2|tank_leak=new", 1},
		{"maintenance clears at once", both, []detect.Finding{leak}, "T1", "T1|restriction=cleared T2|tank_leak=ongoing", 1},
	}
	tr := NewTracker(nil)
	for i, st := range steps {
		// Persist and restore between steps, as the run loop does.
		tr = NewTracker(tr.Records())
		if st.reset != "" {
			tr.ResetTank(st.reset)
		}
		evs := tr.Update(t0.Add(time.Duration(i)*time.Hour), st.evaluated, st.findings)
		if got := statuses(evs); got != st.want {
			t.Errorf("%s: got %q, want %q", st.name, got, st.want)
		}
		if got := len(Notifiable(evs)); got != st.notify {
			t.Errorf("%s: %d notifiable, want %d", st.name, got, st.notify)
		}
	}
}

func TestTrackerSameTimeCountsOnce(t *testing.T) {
	tr := NewTracker(nil)
	tr.Update(t0, []string{"T1"}, []detect.Finding{finding("T1", "tank_leak", "", 0)})
	at := t0.Add(time.Hour)
	for i := range 5 { // the same evaluation repeated (a re-scan of the same data)
		tr = NewTracker(tr.Records())
		evs := tr.Update(at, []string{"T1"}, nil)
		if len(evs) != 1 || evs[0].Status != StatusOngoing {
			t.Fatalf("repeat %d: %v, want one ongoing (held) finding", i, statuses(evs))
		}
	}
}

func TestTrackerSubtypeRefinedIsNotNew(t *testing.T) {
	tr := NewTracker(nil)
	tr.Update(t0, []string{"T1"}, []detect.Finding{finding("T1", "restriction", "abrupt", -3)})
	evs := tr.Update(t0.Add(time.Hour), []string{"T1"}, []detect.Finding{finding("T1", "restriction", "gradual", -5)})
	if len(evs) != 1 || evs[0].Status != StatusOngoing || evs[0].Finding.Subtype != "gradual" {
		t.Errorf("refined subtype gave %+v, want one ongoing gradual restriction", evs)
	}
	evs = tr.Update(t0.Add(2*time.Hour), []string{"T1"}, []detect.Finding{
		finding("T1", "restriction", "gradual", -5), finding("T1", "sensor_fault", "drift", 0), finding("T1", "sensor_fault", "stuck", 0)})
	if got := len(Notifiable(evs)); got != 2 {
		t.Errorf("two sensor subtypes gave %d new events, want 2", got)
	}
}

func TestTrackerRecordsRoundTripJSON(t *testing.T) {
	tr := NewTracker(nil)
	tr.Update(t0, []string{"T1"}, []detect.Finding{finding("T1", "restriction", "abrupt", -35)})
	buf, err := json.Marshal(tr.Records())
	if err != nil {
		t.Fatal(err)
	}
	var back []Record
	if err := json.Unmarshal(buf, &back); err != nil {
		t.Fatal(err)
	}
	evs := NewTracker(back).Update(t0.Add(time.Hour), []string{"T1"}, []detect.Finding{finding("T1", "restriction", "abrupt", -35)})
	if got, want := statuses(evs), "T1|restriction=ongoing"; got != want {
		t.Errorf("after JSON round trip: got %q, want %q", got, want)
	}
}

func TestWriteTableGolden(t *testing.T) {
	evs := []Event{
		{Status: StatusNew, At: t0, Finding: finding("sludge-2", "restriction", "abrupt", -34.6)},
		{Status: StatusOngoing, At: t0, Finding: finding("sump-1", "sensor_fault", "drift", 0)},
		{Status: StatusCleared, At: t0, Finding: finding("wash-1", "excess_outflow", "", 12.25)},
	}
	var buf bytes.Buffer
	if err := WriteTable(&buf, evs); err != nil {
		t.Fatal(err)
	}
	golden := filepath.Join("testdata", "table.golden")
	if *update {
		if err := os.WriteFile(golden, buf.Bytes(), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	want, err := os.ReadFile(golden)
	if err != nil {
		t.Fatal(err)
	}
	if got := buf.String(); got != string(want) {
		t.Errorf("table differs from %s (run with -update to accept):\n got:\n%s\nwant:\n%s", golden, got, want)
	}
}

func TestWebhookRetriesAndHidesURL(t *testing.T) {
	var calls atomic.Int32
	var got webhookBody
	srv := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		if calls.Add(1) == 1 {
			w.WriteHeader(http.StatusServiceUnavailable)
			return
		}
		if err := json.NewDecoder(r.Body).Decode(&got); err != nil {
			t.Errorf("decode: %v", err)
		}
	}))
	defer srv.Close()
	n := WebhookNotifier{URL: srv.URL + "/hook?key=s3cret"}
	evs := []Event{{Status: StatusNew, At: t0, Finding: finding("T1", "restriction", "gradual", -20)}}
	if err := n.Notify(context.Background(), evs); err != nil {
		t.Fatalf("Notify: %v", err)
	}
	if calls.Load() != 2 {
		t.Errorf("calls = %d, want 2 (one 503 then success)", calls.Load())
	}
	if len(got.Events) != 1 || got.Events[0].Kind != "restriction" || got.Caution == "" {
		t.Errorf("payload = %+v", got)
	}

	bad := WebhookNotifier{URL: srv.URL + "/hook?key=s3cret"}
	srv2 := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		w.WriteHeader(http.StatusForbidden)
	}))
	defer srv2.Close()
	bad.URL = srv2.URL + "/hook?key=s3cret"
	err := bad.Notify(context.Background(), evs)
	if err == nil || strings.Contains(err.Error(), "s3cret") {
		t.Errorf("error %v: want an error without the secret", err)
	}
	// A transport error (server gone) is where the URL would show.
	gone := WebhookNotifier{URL: srv2.URL + "/hook?key=s3cret", Client: &http.Client{Timeout: time.Second}}
	srv2.Close()
	err = gone.Notify(context.Background(), evs)
	if err == nil || strings.Contains(err.Error(), "s3cret") {
		t.Errorf("transport error %v: want an error without the secret", err)
	}
}

func TestCommandNotifierGetsJSON(t *testing.T) {
	dir := t.TempDir()
	out := filepath.Join(dir, "got.json")
	n := CommandNotifier{Argv: []string{"sh", "-c", "cat > " + out}}
	evs := []Event{{Status: StatusNew, At: t0, Finding: finding("T9", "tank_leak", "", 0)}}
	if err := n.Notify(context.Background(), evs); err != nil {
		t.Fatal(err)
	}
	var got webhookBody
	b, err := os.ReadFile(out)
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, &got); err != nil {
		t.Fatal(err)
	}
	if len(got.Events) != 1 || got.Events[0].Tank != "T9" || got.Events[0].Kind != "tank_leak" {
		t.Errorf("command got %+v", got)
	}
	if err := (CommandNotifier{Argv: []string{"false"}}).Notify(context.Background(), evs); err == nil {
		t.Error("a failing command must return an error")
	}
}

// A tank whose data are missing has only its feed evaluated: its other
// findings stay as they were (not missed, not cleared), a feed notice is
// new once, ongoing while the feed stays silent, and cleared at the first
// evaluation after the data return (common practice: one page when a feed
// goes silent, one when it is back).
func TestUpdateFeedsWithholdsAndNotifiesOnce(t *testing.T) {
	day := func(d int) time.Time { return time.Date(2026, 1, 1+d, 0, 0, 0, 0, time.UTC) }
	leak := detect.Finding{Tank: "T", Kind: "tank_leak"}
	feed := detect.Finding{Tank: "T", Kind: detect.KindFeed, Subtype: detect.SubSilent}
	tr := NewTracker(nil)
	status := func(evs []Event, kind string) Status {
		for _, e := range evs {
			if e.Finding.Kind == kind {
				return e.Status
			}
		}
		return ""
	}
	if got := status(tr.Update(day(0), []string{"T"}, []detect.Finding{leak}), "tank_leak"); got != StatusNew {
		t.Fatalf("leak: %s, want new", got)
	}
	// Five evaluations with the feed silent: the leak is withheld (more
	// than ClearAfter evaluations without it, yet not cleared); the feed
	// notice is new once, then ongoing.
	for d := 1; d <= 5; d++ {
		evs := tr.UpdateFeeds(day(d), nil, []string{"T"}, []detect.Finding{feed})
		want := StatusOngoing
		if d == 1 {
			want = StatusNew
		}
		if got := status(evs, detect.KindFeed); got != want {
			t.Errorf("day %d: feed notice %s, want %s", d, got, want)
		}
		if got := status(evs, "tank_leak"); got != "" {
			t.Errorf("day %d: leak event %s while withheld, want none", d, got)
		}
	}
	// Data back and the leak still there: the notice clears, the leak goes on.
	evs := tr.Update(day(6), []string{"T"}, []detect.Finding{leak})
	if got := status(evs, detect.KindFeed); got != StatusCleared {
		t.Errorf("data back: feed notice %s, want cleared", got)
	}
	if got := status(evs, "tank_leak"); got != StatusOngoing {
		t.Errorf("data back: leak %s, want ongoing", got)
	}
}
