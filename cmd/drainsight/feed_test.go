package main

import (
	"fmt"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"drainsight/config"
	"drainsight/detect"
	"drainsight/ingest"
	"drainsight/model"
)

// An InfluxDB tank is read up to now minus the site's settle delay, so its
// feed's age counts from there: with a 30 min settle delay (longer than the
// 15 min gap limit) a feed sampled every 10 s is ok at every scan, not in a
// gap that would withhold all its findings. A file tank has no read lag.
func TestInfluxFeedAgeCountsFromTheSettleDelay(t *testing.T) {
	cfg, err := config.Parse([]byte(`
sites:
  - id: s1
    influx: {url: http://127.0.0.1:8086, bucket: db/autogen, settle_delay: 30 min}
tanks:
  - id: IX
    site: s1
    geometry: {shape: vertical_cylinder, diameter: 1.6 m, height: 2.4 m}
    outlet: {diameter: 80 mm, elevation: 0.1 m}
    sensor: {kind: depth, unit: m}
    source: {format: influx}
  - id: FILE
    site: s1
    geometry: {shape: vertical_cylinder, diameter: 1.6 m, height: 2.4 m}
    outlet: {diameter: 80 mm, elevation: 0.1 m}
    sensor: {kind: depth, unit: m}
    source: {format: csv, paths: [x.csv]}
`), "feed.yaml")
	if err != nil {
		t.Fatal(err)
	}
	plans, err := buildPlans(cfg)
	if err != nil {
		t.Fatal(err)
	}
	lag := map[string]time.Duration{}
	for _, p := range plans {
		lag[p.cfg.ID] = p.Detect.ReadLag
	}
	if lag["IX"] != 30*time.Minute || lag["FILE"] != 0 {
		t.Fatalf("read lag %v, want IX 30 min (the settle delay) and FILE 0", lag)
	}
	now := time.Date(2026, 3, 1, 12, 0, 0, 0, time.UTC)
	det := detect.NewState("IX")
	ser := &model.Series{}
	for ts := now.Add(-6 * time.Hour); ts.Before(now.Add(-30 * time.Minute)); ts = ts.Add(10 * time.Second) {
		ser.Append(ts.UnixNano(), 1+1e-4*float64(ts.Unix()%7))
	}
	det.AddSeries(ser, plans[0].Detect)
	if fs := det.Feed(now, plans[0].Detect); fs.State != detect.FeedOK {
		t.Errorf("feed read to now-30 min, with the read lag: %s, want ok", fs.State)
	}
	if fs := det.Feed(now, plans[1].Detect); fs.State != detect.FeedGap {
		t.Errorf("the same feed without a read lag: %s, want gap (the test must be able to tell)", fs.State)
	}
}

// feedPlant writes the CSV of a tank sampled every 60 s at a steady level
// (1 m, 1 mm noise) over the given stretches, and its config with a command
// notifier that appends every notification to notify.jsonl.
func feedPlant(t *testing.T, dir string, stretches [][2]time.Time) string {
	t.Helper()
	rng := rand.New(rand.NewPCG(3, 4))
	var ts []int64
	var hs []float64
	for _, s := range stretches {
		for at := s[0]; at.Before(s[1]); at = at.Add(time.Minute) {
			ts = append(ts, at.UnixNano())
			hs = append(hs, 1+0.001*rng.NormFloat64())
		}
	}
	f, err := os.Create(filepath.Join(dir, "f1.csv"))
	if err != nil {
		t.Fatal(err)
	}
	if err := ingest.WriteCSV(f, "F1", ts, hs); err != nil {
		t.Fatal(err)
	}
	f.Close()
	cfg := filepath.Join(dir, "plant.yaml")
	yaml := fmt.Sprintf(`tanks:
  - id: F1
    geometry: {shape: vertical_cylinder, diameter: 1.6 m, height: 2.4 m}
    outlet: {diameter: 60 mm, elevation: 0 m}
    sensor: {kind: depth, unit: m}
    source: {format: csv, paths: [%s]}
outputs:
  directory: %s
  state_file: %s
  alert: {log: false, command: [sh, -c, 'cat >> %s; echo >> %s']}
`, filepath.Join(dir, "f1.csv"), filepath.Join(dir, "out"), filepath.Join(dir, "state.db"),
		filepath.Join(dir, "notify.jsonl"), filepath.Join(dir, "notify.jsonl"))
	if err := os.WriteFile(cfg, []byte(yaml), 0o644); err != nil {
		t.Fatal(err)
	}
	return cfg
}

// A file tank whose data stop, scanned at a later --now each time (as a
// schedule would): the feed is in a gap at 1 h, silent past the default
// 4 h limit at 5 h, with one feed/silent notice sent; later scans keep it
// ongoing and send nothing; when samples return, one cleared notice. The
// notice is not a tank finding (--fail-on-findings ignores it); feeds.jsonl
// and the state file hold the feed status and the report shows it. The
// limit and the once-and-back rule are the project's requirement; 4 h is
// common practice (see detect.DefaultSilentLimit).
func TestFeedNoticeOnceAndBack(t *testing.T) {
	if _, err := exec.LookPath("sh"); err != nil {
		t.Skip("no sh for the command notifier")
	}
	dir := t.TempDir()
	t0 := time.Date(2026, 4, 1, 6, 0, 0, 0, time.UTC)
	stop := t0.Add(30 * time.Hour)
	cfg := feedPlant(t, dir, [][2]time.Time{{t0, stop}})
	last := stop.Add(-time.Minute)
	notified := func() (newN, clearedN int) {
		b, _ := os.ReadFile(filepath.Join(dir, "notify.jsonl"))
		return strings.Count(string(b), `"status":"new"`), strings.Count(string(b), `"status":"cleared"`)
	}
	feedLine := func() map[string]any {
		recs := readJSONL(t, filepath.Join(dir, "out", "feeds.jsonl"))
		if len(recs) != 1 {
			t.Fatalf("feeds.jsonl: %d lines, want 1", len(recs))
		}
		return recs[0]
	}
	for _, c := range []struct {
		after           time.Duration
		state           string
		summary         string
		newN, clearedN  int
		findingStatuses string
	}{
		{time.Hour, "gap", "Feeds: 0 ok, 1 in a gap, 0 silent", 0, 0, ""},
		{5 * time.Hour, "silent", "Feeds: 0 ok, 0 in a gap, 1 silent", 1, 0, "new"},
		{9 * time.Hour, "silent", "F1 silent since " + last.Format(time.RFC3339) + " (9.0 h)", 1, 0, "ongoing"},
	} {
		now := last.Add(c.after)
		out, stderr, err := runArgs(t, "scan", "--new-state", "--config", cfg, "--now", now.Format(time.RFC3339), "--fail-on-findings")
		if err != nil {
			t.Fatalf("%v after the last sample: scan: %v (a feed notice is not a tank finding)\n%s\n%s", c.after, err, out, stderr)
		}
		if !strings.Contains(out, c.summary) {
			t.Errorf("%v: summary lacks %q:\n%s", c.after, c.summary, out)
		}
		if got := feedLine()["state"]; got != c.state {
			t.Errorf("%v: feeds.jsonl state %v, want %s", c.after, got, c.state)
		}
		var statuses []string
		for _, f := range readJSONL(t, filepath.Join(dir, "out", "findings.jsonl")) {
			if f["kind"] != detect.KindFeed {
				t.Errorf("%v: finding %v %v while the data are missing, want only a feed notice", c.after, f["kind"], f["subtype"])
			}
			statuses = append(statuses, f["status"].(string))
		}
		if got := strings.Join(statuses, ","); got != c.findingStatuses {
			t.Errorf("%v: feed notice statuses %q, want %q", c.after, got, c.findingStatuses)
		}
		if n, cl := notified(); n != c.newN || cl != c.clearedN {
			t.Errorf("%v: notified %d new and %d cleared, want %d and %d", c.after, n, cl, c.newN, c.clearedN)
		}
	}
	rep, _, err := runArgs(t, "report", "--config", cfg, "--now", last.Add(9*time.Hour).Format(time.RFC3339))
	if err != nil {
		t.Fatalf("report: %v", err)
	}
	md, _ := os.ReadFile(filepath.Join(dir, "out", "report.md"))
	if !strings.Contains(string(md), "| F1 | silent for 9.0 h (notice sent) |") {
		t.Errorf("report (%s) lacks the silent feed:\n%s", rep, md)
	}
	// Samples return 10 h after the last one: the notice clears, once.
	back := last.Add(10 * time.Hour)
	cfg = feedPlant(t, dir, [][2]time.Time{{t0, stop}, {back, back.Add(2 * time.Hour)}})
	for i := range 2 {
		now := back.Add(2 * time.Hour)
		out, _, err := runArgs(t, "scan", "--new-state", "--config", cfg, "--now", now.Format(time.RFC3339))
		if err != nil {
			t.Fatalf("scan after the data returned: %v\n%s", err, out)
		}
		// The 10 h gap is in the first pass after the data returned only.
		if got := feedLine(); got["state"] != "ok" || got["gaps_in_pass"] != float64(1-i) ||
			i == 0 && got["longest_gap_in_pass_s"] != 36000.0 {
			t.Errorf("pass %d after the data returned: feeds.jsonl %v, want ok with %d gap of 10 h", i, got, 1-i)
		}
		if n, cl := notified(); n != 1 || cl != 1 {
			t.Errorf("pass %d after the data returned: notified %d new and %d cleared, want 1 and 1", i, n, cl)
		}
	}
}
