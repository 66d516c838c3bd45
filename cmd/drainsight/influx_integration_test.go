package main

import (
	"context"
	"fmt"
	"math"
	"net/http"
	"net/http/httptest"
	"net/http/httputil"
	neturl "net/url"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"sort"
	"strconv"
	"strings"
	"sync/atomic"
	"syscall"
	"testing"
	"time"

	"drainsight/ingest/influx"
)

// These tests need the real InfluxDB that scripts/influxd.sh starts; plain
// "go test ./..." skips them.
func influxOrSkip(t *testing.T) (url, bucket string) {
	url, bucket = os.Getenv("DRAINSIGHT_INFLUX_URL"), os.Getenv("DRAINSIGHT_INFLUX_BUCKET")
	if url == "" || bucket == "" {
		t.Skip("needs a test InfluxDB: run scripts/test.sh, or scripts/influxd.sh run -- go test ./cmd/drainsight")
	}
	return url, bucket
}

// drainKeys lists tank|start|end of every fitted drain, sorted, with K by key.
func drainKeys(t *testing.T, path string) ([]string, map[string]float64) {
	var keys []string
	k := map[string]float64{}
	for _, e := range readJSONL(t, path) {
		key := fmt.Sprintf("%s|%s|%s", e["tank"], e["start"], e["end"])
		keys = append(keys, key)
		k[key] = e["k_m25_s"].(float64)
	}
	sort.Strings(keys)
	return keys, k
}

// sameK reports the keys whose K differ by more than rel between a and b.
func sameK(a, b map[string]float64, rel float64) []string {
	var bad []string
	for key, ka := range a {
		if kb, ok := b[key]; ok && math.Abs(ka/kb-1) > rel {
			bad = append(bad, fmt.Sprintf("%s: %g vs %g", key, ka, kb))
		}
	}
	sort.Strings(bad)
	return bad
}

func findingKeys(t *testing.T, path string) []string {
	var keys []string
	for _, f := range readJSONL(t, path) {
		keys = append(keys, fmt.Sprintf("%s|%s|%v", f["tank"], f["kind"], f["subtype"]))
	}
	sort.Strings(keys)
	return keys
}

// TestInfluxDemoMatchesFiles loads the demo plant into InfluxDB, scans it
// from there window by window, and expects the same drains and findings as
// the scan of the same data from files.
func TestInfluxDemoMatchesFiles(t *testing.T) {
	url, bucket := influxOrSkip(t)
	files, db := t.TempDir(), t.TempDir()
	const days = "40"
	if _, stderr, err := runArgs(t, "demo", "--out", files, "--days", days); err != nil {
		t.Fatalf("file demo: %v\n%s", err, stderr)
	}
	if _, stderr, err := runArgs(t, "demo", "--out", db, "--days", days, "--influx-url", url,
		"--influx-bucket", bucket, "--influx-token-env", "DRAINSIGHT_INFLUX_TOKEN"); err != nil {
		t.Fatalf("influx demo: %v\n%s", err, stderr)
	}
	fe, fk := drainKeys(t, filepath.Join(files, "events.jsonl"))
	de, dk := drainKeys(t, filepath.Join(db, "events.jsonl"))
	if len(fe) < 100 {
		t.Fatalf("only %d drains from files", len(fe))
	}
	if strings.Join(fe, "\n") != strings.Join(de, "\n") {
		t.Errorf("drains differ: %d from files, %d from InfluxDB\nonly files: %v\nonly db: %v", len(fe), len(de), minus(fe, de), minus(de, fe))
	}
	// The same samples give the same fits; 1e-9 allows for the decimal
	// round trip of the readings through line protocol.
	if bad := sameK(fk, dk, 1e-9); len(bad) > 0 {
		t.Errorf("K differs between files and InfluxDB: %v", head(bad))
	}
	ff, df := findingKeys(t, filepath.Join(files, "findings.jsonl")), findingKeys(t, filepath.Join(db, "findings.jsonl"))
	if strings.Join(ff, ",") != strings.Join(df, ",") {
		t.Errorf("findings differ:\nfiles:  %v\ninflux: %v", ff, df)
	}
	// Every transition of findings.jsonl is in the transitions
	// measurement too, once, at its time.
	var wantTr []string
	var withTr []string
	for _, f := range readJSONL(t, filepath.Join(db, "findings.jsonl")) {
		if f["status"] == "new" || f["status"] == "cleared" {
			at, _ := time.Parse(time.RFC3339, f["status_at"].(string))
			wantTr = append(wantTr, fmt.Sprintf("%s|%d", f["tank"], at.UnixNano()))
			if !slices.Contains(withTr, f["tank"].(string)) {
				withTr = append(withTr, f["tank"].(string))
			}
		}
	}
	sort.Strings(wantTr)
	got := writtenField(t, url, bucket, "outlet_finding_transition", "threshold", withTr)
	sort.Strings(got)
	if len(wantTr) == 0 || strings.Join(got, "\n") != strings.Join(wantTr, "\n") {
		t.Errorf("transitions in InfluxDB %v, in findings.jsonl %v", got, wantTr)
	}

	// The same server read through InfluxQL over the v1 /query API (what
	// InfluxDB 3 offers) gives the same drains, K and findings as Flux.
	{
		y, err := os.ReadFile(filepath.Join(db, "demo.yaml"))
		if err != nil {
			t.Fatal(err)
		}
		ql := strings.ReplaceAll(string(y), "      query_window: 24 h\n", "      query_window: 24 h\n      query_language: influxql\n")
		qlCfg, qlOut := filepath.Join(t.TempDir(), "influxql.yaml"), t.TempDir()
		if err := os.WriteFile(qlCfg, []byte(ql), 0o600); err != nil {
			t.Fatal(err)
		}
		if _, stderr, err := runArgs(t, "backfill", "--new-state", "--config", qlCfg, "--state", filepath.Join(t.TempDir(), "ql.db"), "--out", qlOut,
			"--since", "2026-01-01", "--until", "2026-02-14"); err != nil && exitCode(err) != 1 {
			t.Fatalf("InfluxQL backfill: %v\n%s", err, stderr)
		}
		qe, qk := drainKeys(t, filepath.Join(qlOut, "events.jsonl"))
		if strings.Join(qe, "\n") != strings.Join(de, "\n") {
			t.Errorf("InfluxQL drains differ from Flux: %d vs %d\nonly InfluxQL: %v\nonly Flux: %v", len(qe), len(de), head(minus(qe, de)), head(minus(de, qe)))
		}
		if bad := sameK(qk, dk, 1e-9); len(bad) > 0 {
			t.Errorf("K differs between InfluxQL and Flux: %v", head(bad))
		}
		t.Logf("InfluxQL: %d drains, as Flux", len(qe))
	}

	// Backfill the same history with the server killed part-way and
	// restarted: after it completes (resuming if it gave up), every drain is
	// stored once, none lost. K is compared to 0.1 %: the segmenter's
	// noise estimate after a resume starts from the lookback alone, which can
	// move a fit's outlier screen by a sample.
	start := os.Getenv("DRAINSIGHT_INFLUXD_START")
	dir := os.Getenv("DRAINSIGHT_INFLUXD_DIR")
	if start == "" || dir == "" {
		t.Skip("server control not exported by scripts/influxd.sh")
	}
	// The backfill writes its fits back to a measurement of its own, so
	// that what reaches InfluxDB is told from the demo scan's write-back.
	demoCfg, err := os.ReadFile(filepath.Join(db, "demo.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	const backfillFits = "outlet_fit_backfill"
	withMeas := strings.ReplaceAll(string(demoCfg), "      query_window: 24 h\n", "      query_window: 24 h\n      fits_measurement: "+backfillFits+"\n")
	// a failed write-back is retried at the next round of the same pass
	withMeas = strings.Replace(withMeas, "\noutputs:\n", "\noutputs:\n  delivery:\n    retry_min: 0 s\n", 1)
	if withMeas == string(demoCfg) {
		t.Fatal("demo.yaml has no query_window line to add fits_measurement after")
	}
	cfg := filepath.Join(t.TempDir(), "backfill.yaml")
	if err := os.WriteFile(cfg, []byte(withMeas), 0o600); err != nil {
		t.Fatal(err)
	}
	state := filepath.Join(t.TempDir(), "backfill.db")
	done := make(chan error, 1)
	go func() {
		_, _, err := runArgs(t, "backfill", "--new-state", "--config", cfg, "--state", state, "--out", t.TempDir(),
			"--since", "2026-01-05", "--until", "2026-02-14")
		done <- err
	}()
	time.Sleep(1500 * time.Millisecond)
	killInfluxd(t, dir)
	time.Sleep(2 * time.Second)
	if out, err := exec.Command(start).CombinedOutput(); err != nil {
		t.Fatalf("restart influxd: %v: %s", err, out)
	}
	err = <-done
	for attempt := 0; err != nil && attempt < 3; attempt++ {
		t.Logf("backfill stopped (%v); resuming", err)
		_, _, err = runArgs(t, "backfill", "--new-state", "--config", cfg, "--state", state, "--out", t.TempDir(),
			"--since", "2026-01-05", "--until", "2026-02-14")
	}
	if err != nil {
		t.Fatalf("backfill did not complete: %v", err)
	}
	st, err := openStore(state, false)
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	var stored []string
	sk := map[string]float64{}
	tanks := map[string]bool{}
	for _, k := range de {
		tanks[strings.SplitN(k, "|", 2)[0]] = true
	}
	for tank := range tanks {
		fits, err := st.Fits(tank, 0, 1<<62)
		if err != nil {
			t.Fatal(err)
		}
		for _, f := range fits {
			key := fmt.Sprintf("%s|%s|%s", tank, time.Unix(0, f.StartNs).UTC().Format(time.RFC3339),
				time.Unix(0, f.EndNs).UTC().Format(time.RFC3339))
			stored = append(stored, key)
			sk[key] = f.KM25s
		}
	}
	sort.Strings(stored)
	if strings.Join(stored, "\n") != strings.Join(de, "\n") {
		t.Errorf("after the outage the store holds %d drains, want the %d of an undisturbed scan\nonly stored: %v\nonly undisturbed: %v",
			len(stored), len(de), minus(stored, de), minus(de, stored))
	}
	if bad := sameK(sk, dk, 1e-3); len(bad) > 0 {
		t.Errorf("K after the outage differs by more than 0.1 %%: %v", head(bad))
	}
	// Write-back through the outbox: InfluxDB holds exactly the stored
	// fits (one point per tank and end time; a repeat would overwrite, a
	// loss shows as a missing point), and nothing is left queued.
	pending, err := st.Pending("")
	if err != nil {
		t.Fatal(err)
	}
	if len(pending) > 0 {
		t.Errorf("%d write-back items still queued after the backfill completed: first %s (%s)", len(pending), pending[0].ID, pending[0].LastError)
	}
	var ids []string
	for tank := range tanks {
		ids = append(ids, tank)
	}
	written := writtenFits(t, url, bucket, backfillFits, ids)
	var want []string
	for tank := range tanks {
		fits, _ := st.Fits(tank, 0, 1<<62)
		for _, f := range fits {
			want = append(want, fmt.Sprintf("%s|%d", tank, f.EndNs))
		}
	}
	sort.Strings(written)
	sort.Strings(want)
	t.Logf("after the outage: %d fit points written back, %d fits stored", len(written), len(want))
	if strings.Join(written, ",") != strings.Join(want, ",") {
		t.Errorf("InfluxDB holds %d fit points of the backfill, the store %d fits\nonly in InfluxDB: %v\nonly stored: %v",
			len(written), len(want), head(minus(written, want)), head(minus(want, written)))
	}
}

func minus(a, b []string) []string {
	in := map[string]bool{}
	for _, x := range b {
		in[x] = true
	}
	var out []string
	for _, x := range a {
		if !in[x] {
			out = append(out, x)
		}
	}
	return out
}

func head(s []string) []string {
	if len(s) > 3 {
		return s[:3]
	}
	return s
}

func killInfluxd(t *testing.T, dir string) {
	b, err := os.ReadFile(filepath.Join(dir, "pid"))
	if err != nil {
		t.Fatal(err)
	}
	pid, err := strconv.Atoi(strings.TrimSpace(string(b)))
	if err != nil {
		t.Fatal(err)
	}
	if err := syscall.Kill(pid, syscall.SIGKILL); err != nil {
		t.Fatalf("kill influxd: %v", err)
	}
	for range 100 {
		if syscall.Kill(pid, 0) != nil {
			return
		}
		time.Sleep(50 * time.Millisecond)
	}
}

func TestInfluxWrongTokenNamesTheSetting(t *testing.T) {
	url, bucket := influxOrSkip(t)
	if os.Getenv("DRAINSIGHT_INFLUX_TOKEN") == "" {
		t.Skip("server runs without authentication")
	}
	dir := t.TempDir()
	cfg := filepath.Join(dir, "plant.yaml")
	os.WriteFile(cfg, []byte(fmt.Sprintf(`sites:
  - id: s1
    influx: {url: %s, bucket: %q, token_env: DRAINSIGHT_TEST_BAD_TOKEN}
tanks:
  - id: T1
    geometry: {shape: vertical_cylinder, diameter: 2 m, height: 3 m}
    outlet: {diameter: 50 mm, elevation: 0 m}
    sensor: {kind: depth, unit: m}
    source: {format: influx}
`, url, bucket)), 0o644)
	t.Setenv("DRAINSIGHT_TEST_BAD_TOKEN", "admin:wrong-password")
	_, _, err := runArgs(t, "check", "--config", cfg)
	if err == nil || !strings.Contains(err.Error(), "token") {
		t.Fatalf("check with a wrong token: %v, want an error naming the token", err)
	}
	if strings.Contains(err.Error(), "wrong-password") {
		t.Errorf("the error shows the secret: %v", err)
	}
}

// TestInfluxWriteRefusedThenDelivered puts a proxy in front of the test
// server that answers every write with 503 while queries pass: the scan
// still fits and stores every drain, keeps the write-back queued in the
// state file and says so in its summary; once writes are accepted the next
// scan delivers the queue, and InfluxDB then holds exactly the stored fits.
func TestInfluxWriteRefusedThenDelivered(t *testing.T) {
	url, bucket := influxOrSkip(t)
	db := t.TempDir()
	if _, stderr, err := runArgs(t, "demo", "--out", db, "--days", "20", "--influx-url", url,
		"--influx-bucket", bucket, "--influx-token-env", "DRAINSIGHT_INFLUX_TOKEN"); err != nil {
		t.Fatalf("influx demo: %v\n%s", err, stderr)
	}
	target, err := neturl.Parse(url)
	if err != nil {
		t.Fatal(err)
	}
	var refuse atomic.Bool
	refuse.Store(true)
	var refused atomic.Int64
	rp := httputil.NewSingleHostReverseProxy(target)
	proxy := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		if refuse.Load() && strings.Contains(r.URL.Path, "write") {
			refused.Add(1)
			http.Error(w, "writes paused for maintenance", http.StatusServiceUnavailable)
			return
		}
		rp.ServeHTTP(w, r)
	}))
	defer proxy.Close()
	demoCfg, err := os.ReadFile(filepath.Join(db, "demo.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	const meas = "outlet_fit_refused"
	y := strings.ReplaceAll(string(demoCfg), "url: "+url, "url: "+proxy.URL)
	y = strings.ReplaceAll(y, "      query_window: 24 h\n", "      query_window: 24 h\n      fits_measurement: "+meas+"\n")
	y = strings.Replace(y, "\noutputs:\n", "\noutputs:\n  delivery:\n    retry_min: 0 s\n", 1)
	if !strings.Contains(y, proxy.URL) || !strings.Contains(y, meas) {
		t.Fatalf("demo.yaml not rewritten for the proxy:\n%s", y)
	}
	cfg := filepath.Join(t.TempDir(), "proxied.yaml")
	if err := os.WriteFile(cfg, []byte(y), 0o600); err != nil {
		t.Fatal(err)
	}
	state := filepath.Join(t.TempDir(), "s.db")
	out, stderr, err := runArgs(t, "backfill", "--new-state", "--config", cfg, "--state", state, "--out", t.TempDir(), "--since", "2026-01-01")
	if err != nil {
		t.Fatalf("backfill with writes refused failed (write-back must not fail the pass): %v\n%s", err, stderr)
	}
	st, err := openStore(state, false)
	if err != nil {
		t.Fatal(err)
	}
	pending, _ := st.Pending("")
	var ids []string
	tankSet := map[string]bool{}
	stored := 0
	tanks, _ := st.Tanks()
	for _, tank := range tanks {
		fits, _ := st.Fits(tank, 0, 1<<62)
		stored += len(fits)
		if len(fits) > 0 && !tankSet[tank] {
			tankSet[tank] = true
			ids = append(ids, tank)
		}
	}
	st.Close()
	if stored < 20 || len(pending) == 0 || refused.Load() == 0 {
		t.Fatalf("writes refused: %d fits stored, %d items queued, %d writes refused; want fits stored and queued", stored, len(pending), refused.Load())
	}
	t.Logf("writes refused: %d fits stored, %d write-back items queued, %d write requests refused", stored, len(pending), refused.Load())
	if !strings.Contains(out, "Write-back to InfluxDB:") || !strings.Contains(out, "failing:") || strings.Contains(out, " 0 pending") {
		t.Errorf("summary with writes refused does not say the write-back is pending and failing:\n%s", out)
	}
	refuse.Store(false)
	// the next scheduled pass (retry_min 0: the failed item is due again)
	out, stderr, err = runArgs(t, "scan", "--new-state", "--config", cfg, "--state", state, "--out", t.TempDir())
	if err != nil {
		t.Fatalf("scan with writes accepted: %v\n%s", err, stderr)
	}
	if !strings.Contains(out, "Write-back to InfluxDB:") || !strings.Contains(out, " 0 pending") {
		t.Errorf("summary after delivery does not say the queue is empty:\n%s", out)
	}
	st, err = openStore(state, false)
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	if left, _ := st.Pending(""); len(left) != 0 {
		t.Errorf("%d items still queued after writes were accepted", len(left))
	}
	if n := len(writtenFits(t, url, bucket, meas, ids)); n != stored {
		t.Errorf("InfluxDB holds %d fit points, the store %d fits", n, stored)
	}
}

// writtenFits lists the fit points the write-back left in measurement meas
// for the tanks, as tank|end time.
func writtenFits(t *testing.T, url, bucket, meas string, tanks []string) []string {
	t.Helper()
	return writtenField(t, url, bucket, meas, "k_m25s", tanks)
}

// writtenField lists the points of measurement meas with field for the
// tanks, as tank|time.
func writtenField(t *testing.T, url, bucket, meas, field string, tanks []string) []string {
	t.Helper()
	c, err := influx.New(influx.Conn{URL: url, Bucket: bucket, Token: os.Getenv("DRAINSIGHT_INFLUX_TOKEN")}, influx.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	src, err := c.Source(influx.SeriesSpec{Measurement: meas, Field: field, TankTag: "tank"})
	if err != nil {
		t.Fatal(err)
	}
	var out []string
	if _, err := src.Pull(context.Background(), tanks, 0, 1<<62, func(tank string, tNs int64, _ float64) {
		out = append(out, fmt.Sprintf("%s|%d", tank, tNs))
	}); err != nil {
		t.Fatal(err)
	}
	return out
}
