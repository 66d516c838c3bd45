package main

import (
	"context"
	"io"
	"log/slog"
	"net/http"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"

	"drainsight/config"
)

func get(t *testing.T, url, token string) (int, string) {
	t.Helper()
	req, _ := http.NewRequest(http.MethodGet, url, nil)
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	b, _ := io.ReadAll(resp.Body)
	return resp.StatusCode, string(b)
}

// serve's HTTP side on the demo plant: /healthz at once, /readyz only after
// a scan, /metrics in the Prometheus text format with the scan's numbers
// (drains fitted as the scan counted them, open findings, feed ages), the
// status page with every tank and the caution, and the bearer token
// refused when wrong.
func TestServeHTTPEndpoints(t *testing.T) {
	dir := demoPlant(t, "20")
	cfg, err := config.Load(filepath.Join(dir, "demo.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	mon := newMonitor()
	mon.now = func() time.Time { return time.Date(2026, 1, 25, 6, 0, 0, 0, time.UTC) }
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	const token = "t0ken-for-the-test"
	addr, done, err := serveHTTP(ctx, "127.0.0.1:0", mon.handler(token, nil), discardLog())
	if err != nil {
		t.Fatal(err)
	}
	base := "http://" + addr
	if c, _ := get(t, base+"/healthz", ""); c != 200 {
		t.Errorf("/healthz: %d", c)
	}
	if c, body := get(t, base+"/readyz", token); c != 503 || !strings.Contains(body, "no scan") {
		t.Errorf("/readyz before a scan: %d %q", c, body)
	}
	e := &env{stdout: io.Discard, stderr: io.Discard}
	start := time.Now()
	res, err := scanOnce(ctx, e, cfg, t.TempDir(), filepath.Join(t.TempDir(), "s.db"), scanOptions{newState: true}, discardLog())
	mon.record(res, time.Since(start), err)
	if err != nil {
		t.Fatal(err)
	}
	if c, _ := get(t, base+"/readyz", token); c != 200 {
		t.Errorf("/readyz after a good scan: %d", c)
	}
	if c, _ := get(t, base+"/metrics", ""); c != 401 {
		t.Errorf("/metrics without the token: %d, want 401", c)
	}
	if c, _ := get(t, base+"/metrics", "wrong"); c != 401 {
		t.Errorf("/metrics with a wrong token: %d, want 401", c)
	}
	c, metrics := get(t, base+"/metrics", token)
	if c != 200 {
		t.Fatalf("/metrics: %d", c)
	}
	fitted := 0
	for _, o := range res.outcomes {
		fitted += len(o.Fits)
	}
	m := regexp.MustCompile(`(?m)^drainsight_drains_fitted_total (\d+)$`).FindStringSubmatch(metrics)
	if m == nil || m[1] != strconv.Itoa(fitted) || fitted == 0 {
		t.Errorf("drains fitted in /metrics %v, the scan fitted %d", m, fitted)
	}
	for _, want := range []string{`drainsight_scans_total{result="ok"} 1`, `drainsight_findings_open{kind="restriction",tank="KV-SMP-4"} 1`,
		`drainsight_feed_age_seconds{tank="KV-BWR-1"}`, "drainsight_scan_duration_seconds_bucket", `drainsight_outbox_pending{what="notifications"} 0`} {
		if !strings.Contains(metrics, want) {
			t.Errorf("/metrics lacks %s", want)
		}
	}
	c, page := get(t, base+"/", token)
	if c != 200 || !strings.Contains(page, "KV-SMP-4") || !strings.Contains(page, "restriction/abrupt") || !strings.Contains(page, "licensed practice") {
		t.Errorf("status page: %d\n%s", c, page)
	}
	cancel()
	<-done
}

func discardLog() *slog.Logger { return slog.New(slog.DiscardHandler) }
