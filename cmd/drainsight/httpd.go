package main

import (
	"context"
	"crypto/subtle"
	"errors"
	"fmt"
	"html/template"
	"log/slog"
	"net"
	"net/http"
	"sort"
	"strings"
	"sync"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/promhttp"

	"drainsight/alert"
	"drainsight/config"
)

// monitor is what serve shows over HTTP: the metrics of every scan and the
// fleet as the last scan left it. It is safe for concurrent use.
type monitor struct {
	reg *prometheus.Registry

	scans       *prometheus.CounterVec
	scanSeconds prometheus.Histogram
	samples     prometheus.Counter
	fitted      prometheus.Counter
	rejected    *prometheus.CounterVec
	findings    *prometheus.GaugeVec
	pending     *prometheus.GaugeVec
	lastSuccess prometheus.Gauge

	mu       sync.Mutex
	lastErr  error
	scanned  bool
	fleet    []fleetRow
	feedLast map[string]time.Time // tank: newest sample at the last scan
	now      func() time.Time
}

// fleetRow is one tank on the status page.
type fleetRow struct {
	Tank, Feed, Findings string
	LastSample           time.Time
	Drains               int
}

func newMonitor() *monitor {
	m := &monitor{reg: prometheus.NewRegistry(), feedLast: map[string]time.Time{}, now: time.Now}
	m.scans = prometheus.NewCounterVec(prometheus.CounterOpts{Name: "drainsight_scans_total", Help: "Scans run, by result (ok, failed)."}, []string{"result"})
	m.scanSeconds = prometheus.NewHistogram(prometheus.HistogramOpts{Name: "drainsight_scan_duration_seconds", Help: "Duration of a scan.",
		Buckets: prometheus.ExponentialBuckets(0.1, 2, 14)})
	m.samples = prometheus.NewCounter(prometheus.CounterOpts{Name: "drainsight_samples_read_total", Help: "Level samples read."})
	m.fitted = prometheus.NewCounter(prometheus.CounterOpts{Name: "drainsight_drains_fitted_total", Help: "Drains fitted."})
	m.rejected = prometheus.NewCounterVec(prometheus.CounterOpts{Name: "drainsight_falls_rejected_total", Help: "Falls not taken as drains, by reason."}, []string{"reason"})
	m.findings = prometheus.NewGaugeVec(prometheus.GaugeOpts{Name: "drainsight_findings_open", Help: "Open findings at the last scan (1 each), by tank and kind."}, []string{"tank", "kind"})
	m.pending = prometheus.NewGaugeVec(prometheus.GaugeOpts{Name: "drainsight_outbox_pending", Help: "Side effects waiting in the state file after the last scan, by what (notifications, write-back)."}, []string{"what"})
	m.lastSuccess = prometheus.NewGauge(prometheus.GaugeOpts{Name: "drainsight_last_success_timestamp_seconds", Help: "Unix time of the last successful scan."})
	feedAge := prometheus.NewDesc("drainsight_feed_age_seconds", "Seconds since each tank's newest level sample (as of the last scan), now.", []string{"tank"}, nil)
	m.reg.MustRegister(m.scans, m.scanSeconds, m.samples, m.fitted, m.rejected, m.findings, m.pending, m.lastSuccess,
		collectorFunc{desc: feedAge, collect: func(ch chan<- prometheus.Metric) {
			m.mu.Lock()
			defer m.mu.Unlock()
			now := m.now()
			for tank, last := range m.feedLast {
				ch <- prometheus.MustNewConstMetric(feedAge, prometheus.GaugeValue, now.Sub(last).Seconds(), tank)
			}
		}})
	return m
}

// collectorFunc is a collector computed at scrape time.
type collectorFunc struct {
	desc    *prometheus.Desc
	collect func(chan<- prometheus.Metric)
}

func (c collectorFunc) Describe(ch chan<- *prometheus.Desc) { ch <- c.desc }
func (c collectorFunc) Collect(ch chan<- prometheus.Metric) { c.collect(ch) }

// record takes one scan's result (res may be nil when it failed early).
func (m *monitor) record(res *scanResult, took time.Duration, err error) {
	m.scanSeconds.Observe(took.Seconds())
	result := "ok"
	if err != nil {
		result = "failed"
	}
	m.scans.WithLabelValues(result).Inc()
	m.mu.Lock()
	defer m.mu.Unlock()
	m.lastErr, m.scanned = err, true
	if err == nil {
		m.lastSuccess.Set(float64(m.now().Unix()))
	}
	if res == nil {
		return
	}
	open := map[string][]string{}
	m.findings.Reset()
	for _, e := range res.events {
		if e.Status == alert.StatusCleared || !e.At.Equal(res.now) {
			continue
		}
		m.findings.WithLabelValues(e.Finding.Tank, e.Finding.Kind).Set(1)
		k := e.Finding.Kind
		if e.Finding.Subtype != "" {
			k += "/" + e.Finding.Subtype
		}
		open[e.Finding.Tank] = append(open[e.Finding.Tank], k)
	}
	m.fleet = m.fleet[:0]
	for i := range res.outcomes {
		o := &res.outcomes[i]
		m.samples.Add(float64(o.Samples))
		m.fitted.Add(float64(len(o.Fits)))
		st := o.Seg
		for reason, n := range map[string]int{"too_short": st.RejectedShort, "too_small": st.RejectedSmall, "few_samples": st.RejectedFew,
			"transient_only": st.RejectedTransient, "inflow": st.RejectedInflow, "too_slow": st.RejectedSlow} {
			if n > 0 {
				m.rejected.WithLabelValues(reason).Add(float64(n))
			}
		}
		row := fleetRow{Tank: o.Tank, Drains: len(o.Fits), Findings: strings.Join(open[o.Tank], ", ")}
		if fs, ok := o.Feed(); ok {
			row.Feed, row.LastSample = string(fs.State), fs.LastSample
			if !fs.LastSample.IsZero() {
				m.feedLast[o.Tank] = fs.LastSample
			}
		}
		if o.Err != nil {
			row.Feed = "failed: " + o.Err.Error()
		}
		m.fleet = append(m.fleet, row)
	}
	m.pending.WithLabelValues("notifications").Set(float64(res.notified.Pending))
	m.pending.WithLabelValues("write_back").Set(float64(res.writeBack.Pending))
}

var statusPage = template.Must(template.New("status").Parse(`<!doctype html>
<html lang="en"><head><meta charset="utf-8"><title>drainsight: fleet</title>
<style>body{font-family:sans-serif;margin:2em}table{border-collapse:collapse}td,th{padding:.2em .8em;border-bottom:1px solid #ccc;text-align:left;white-space:nowrap}</style>
</head><body><h1>Fleet at the last scan</h1>
{{if .Err}}<p><strong>The last scan failed:</strong> {{.Err}}</p>{{end}}
<table><thead><tr><th>tank</th><th>feed</th><th>newest sample</th><th>drains fitted</th><th>open findings</th></tr></thead><tbody>
{{range .Fleet}}<tr><td>{{.Tank}}</td><td>{{.Feed}}</td><td>{{if not .LastSample.IsZero}}{{.LastSample.Format "2006-01-02 15:04:05Z07:00"}}{{end}}</td><td>{{.Drains}}</td><td>{{.Findings}}</td></tr>
{{end}}</tbody></table>
<p>Draining or entering tanks can hurt people: follow your site's procedures, local codes and licensed practice; drainsight only advises.</p>
</body></html>
`))

// handler serves /healthz (the process is alive), /readyz (the last scan
// succeeded and every InfluxDB site answers a query), /metrics and the
// status page /. A bearer token, when configured, guards all but /healthz.
func (m *monitor) handler(token string, ready func(context.Context) error) http.Handler {
	mux := http.NewServeMux()
	guard := func(h http.Handler) http.Handler {
		if token == "" {
			return h
		}
		return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
			got, ok := strings.CutPrefix(r.Header.Get("Authorization"), "Bearer ")
			if !ok || subtle.ConstantTimeCompare([]byte(got), []byte(token)) != 1 {
				w.Header().Set("WWW-Authenticate", `Bearer realm="drainsight"`)
				http.Error(w, "unauthorised", http.StatusUnauthorized)
				return
			}
			h.ServeHTTP(w, r)
		})
	}
	mux.HandleFunc("GET /healthz", func(w http.ResponseWriter, _ *http.Request) { fmt.Fprintln(w, "ok") })
	mux.Handle("GET /readyz", guard(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		m.mu.Lock()
		scanned, lastErr := m.scanned, m.lastErr
		m.mu.Unlock()
		var why []string
		if !scanned {
			why = append(why, "no scan has finished yet")
		} else if lastErr != nil {
			why = append(why, "the last scan failed: "+lastErr.Error())
		}
		if ready != nil {
			ctx, cancel := context.WithTimeout(r.Context(), 10*time.Second)
			defer cancel()
			if err := ready(ctx); err != nil {
				why = append(why, err.Error())
			}
		}
		if len(why) > 0 {
			http.Error(w, strings.Join(why, "\n"), http.StatusServiceUnavailable)
			return
		}
		fmt.Fprintln(w, "ready")
	})))
	mux.Handle("GET /metrics", guard(promhttp.HandlerFor(m.reg, promhttp.HandlerOpts{})))
	mux.Handle("GET /{$}", guard(http.HandlerFunc(func(w http.ResponseWriter, _ *http.Request) {
		m.mu.Lock()
		fleet := append([]fleetRow(nil), m.fleet...)
		err := m.lastErr
		m.mu.Unlock()
		sort.Slice(fleet, func(i, j int) bool { return fleet[i].Tank < fleet[j].Tank })
		w.Header().Set("Content-Type", "text/html; charset=utf-8")
		statusPage.Execute(w, struct {
			Fleet []fleetRow
			Err   error
		}{fleet, err})
	})))
	return mux
}

// sitesReady queries every InfluxDB site once (influx.Client.Check runs a
// real query).
func sitesReady(cfg *config.Config) func(context.Context) error {
	return func(ctx context.Context) error {
		clients, err := openClients(cfg)
		if err != nil {
			return err
		}
		defer closeClients(clients)
		var errs []error
		for site, c := range clients {
			if err := c.Check(ctx); err != nil {
				errs = append(errs, fmt.Errorf("site %s: %w", site, err))
			}
		}
		return errors.Join(errs...)
	}
}

// serveHTTP listens on addr until ctx ends; it returns the listener's
// address (for a port of 0) and a channel closed when the server stopped.
func serveHTTP(ctx context.Context, addr string, h http.Handler, log *slog.Logger) (string, <-chan struct{}, error) {
	ln, err := net.Listen("tcp", addr)
	if err != nil {
		return "", nil, fmt.Errorf("outputs.http.address %q: %w", addr, err)
	}
	srv := &http.Server{Handler: h, ReadHeaderTimeout: 5 * time.Second, ReadTimeout: 10 * time.Second,
		WriteTimeout: 30 * time.Second, IdleTimeout: 60 * time.Second}
	done := make(chan struct{})
	go func() {
		defer close(done)
		if err := srv.Serve(ln); err != nil && !errors.Is(err, http.ErrServerClosed) {
			log.Error("http server", "err", err)
		}
	}()
	go func() {
		<-ctx.Done()
		sctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
		defer cancel()
		srv.Shutdown(sctx)
	}()
	return ln.Addr().String(), done, nil
}
