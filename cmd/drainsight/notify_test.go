package main

import (
	"encoding/json"
	"io"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"drainsight/scan"
	"drainsight/store"
)

// TestNotificationsNeverLost: a webhook receiver that answers 404 loses
// nothing. The scan exits 1 saying notifications are pending and naming
// the setting; the transitions wait in the state file; the next scan,
// with the receiver fixed, delivers each of them once (by its stable id);
// a third scan sends nothing again. The demo plant's history is cut at
// 2026-01-17 12:00, half a day after its sump's outlet blocked, so the
// pass's own transitions are within the notify horizon.
func TestNotificationsNeverLost(t *testing.T) {
	dir := demoPlant(t, "20")
	var mu sync.Mutex
	broken := true
	got := map[string]int{}
	var refused int
	recv := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		mu.Lock()
		defer mu.Unlock()
		if broken {
			refused++
			http.NotFound(w, r)
			return
		}
		b, _ := io.ReadAll(r.Body)
		var doc struct {
			Events []struct {
				ID     string `json:"id"`
				Status string `json:"status"`
			} `json:"events"`
		}
		if err := json.Unmarshal(b, &doc); err != nil {
			t.Errorf("webhook body: %v", err)
		}
		for _, e := range doc.Events {
			got[e.ID]++
		}
	}))
	defer recv.Close()
	y, err := os.ReadFile(filepath.Join(dir, "demo.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	cfg := filepath.Join(dir, "hooked.yaml")
	// retry_min 0: a failed transition is due again at the next pass
	hooked := strings.Replace(string(y), "\noutputs:\n", "\noutputs:\n  delivery:\n    retry_min: 0 s\n  alert:\n    webhook_url: "+recv.URL+"/hook\n", 1)
	if err := os.WriteFile(cfg, []byte(hooked), 0o600); err != nil {
		t.Fatal(err)
	}
	state := filepath.Join(t.TempDir(), "s.db")
	scanIt := func() (string, error) {
		out, _, err := runArgs(t, "scan", "--new-state", "--config", cfg, "--state", state, "--out", t.TempDir(), "--now", "2026-01-17T12:00:00Z")
		return out, err
	}
	out, err := scanIt()
	if err == nil || exitCode(err) != 1 || !strings.Contains(err.Error(), "notifications pending") {
		t.Fatalf("scan with the receiver answering 404: err %v (exit %d), want exit 1 saying notifications are pending", err, exitCode(err))
	}
	if !strings.Contains(out, "Notifications: ") || !strings.Contains(out, " pending; failing: notify:webhook") || !strings.Contains(out, "outputs.alert.webhook_url") {
		t.Errorf("summary does not say the notifications are pending and which setting to check:\n%s", out)
	}
	st, err := openStore(state, false)
	if err != nil {
		t.Fatal(err)
	}
	queued, _ := st.Pending("notify:webhook")
	st.Close()
	if len(queued) == 0 || refused == 0 {
		t.Fatalf("%d transitions queued, %d requests refused: the cut history should give some", len(queued), refused)
	}
	mu.Lock()
	broken = false
	mu.Unlock()
	if _, err := scanIt(); err != nil {
		t.Fatalf("scan with the receiver fixed: %v", err)
	}
	if _, err := scanIt(); err != nil {
		t.Fatalf("third scan: %v", err)
	}
	mu.Lock()
	if len(got) != len(queued) {
		t.Errorf("receiver got %d distinct transitions, %d were queued", len(got), len(queued))
	}
	for _, it := range queued {
		id := strings.TrimPrefix(it.ID, "notify:webhook|")
		if got[id] != 1 {
			t.Errorf("transition %s received %d times, want once", id, got[id])
		}
	}
	t.Logf("%d transitions: %d requests refused, then each delivered once", len(queued), refused)
	mu.Unlock()

	// a transition queued for a notifier the config no longer names is
	// dropped by the next scan, not kept pending for ever
	st, err = openStore(state, false)
	if err != nil {
		t.Fatal(err)
	}
	if err := st.Enqueue(store.OutboxItem{ID: "notify:pager|x", Sink: "notify:pager", Kind: scan.OutboxAlert, QueuedNs: time.Now().UnixNano()}); err != nil {
		t.Fatal(err)
	}
	st.Close()
	if _, err := scanIt(); err != nil {
		t.Fatalf("scan with an orphan item: %v", err)
	}
	st, err = openStore(state, false)
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	if left, _ := st.Pending("notify:pager"); len(left) != 0 {
		t.Errorf("%d items of an unconfigured notifier left", len(left))
	}
}
