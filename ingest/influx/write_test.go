package influx

import (
	"context"
	"errors"
	"io"
	"math"
	"net/http"
	"net/http/httptest"
	"strings"
	"sync"
	"testing"
	"time"

	"drainsight/model"
)

// writeSink records write requests and answers with the statuses in order
// (204 once they run out).
type writeSink struct {
	mu       sync.Mutex
	statuses []int
	bodies   []string
	queries  []string
}

func (s *writeSink) ServeHTTP(w http.ResponseWriter, r *http.Request) {
	b, _ := io.ReadAll(r.Body)
	s.mu.Lock()
	defer s.mu.Unlock()
	s.bodies = append(s.bodies, string(b))
	s.queries = append(s.queries, r.URL.Path+"?"+r.URL.RawQuery)
	code := http.StatusNoContent
	if len(s.statuses) > 0 {
		code, s.statuses = s.statuses[0], s.statuses[1:]
	}
	if code >= 400 {
		w.Header().Set("Content-Type", "application/json")
		w.WriteHeader(code)
		io.WriteString(w, `{"code":"x","message":"failed"}`)
		return
	}
	w.WriteHeader(code)
}

func newSink(t *testing.T, batch int, statuses ...int) (*writeSink, *Client) {
	t.Helper()
	s := &writeSink{statuses: statuses}
	srv := httptest.NewServer(s)
	t.Cleanup(srv.Close)
	c, err := New(Conn{URL: srv.URL, Org: "acme", Bucket: "tanks/autogen", Token: "tok"}, Options{BatchSize: batch,
		Retry: Retry{Attempts: 3, sleep: func(context.Context, time.Duration) error { return nil }}})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(c.Close)
	return s, c
}

func TestWriteLevelsBatchesAndSkipsNaN(t *testing.T) {
	s, c := newSink(t, 3)
	ts := []int64{1, 2, 3, 4, 5, 6, 7, 8}
	vs := []float64{0.5, math.NaN(), 1, 2, math.Inf(1), 3, 4, 5}
	if err := c.WriteLevels(context.Background(), "tank_level", "level", "tank", `T "1"`, ts, vs); err != nil {
		t.Fatal(err)
	}
	want := []string{
		"tank_level,tank=T\\ \"1\" level=0.5 1\ntank_level,tank=T\\ \"1\" level=1 3\ntank_level,tank=T\\ \"1\" level=2 4\n",
		"tank_level,tank=T\\ \"1\" level=3 6\ntank_level,tank=T\\ \"1\" level=4 7\ntank_level,tank=T\\ \"1\" level=5 8\n",
	}
	if len(s.bodies) != len(want) {
		t.Fatalf("got %d requests %q, want %d", len(s.bodies), s.bodies, len(want))
	}
	for i := range want {
		if s.bodies[i] != want[i] {
			t.Errorf("batch %d:\ngot  %q\nwant %q", i, s.bodies[i], want[i])
		}
	}
	if q := s.queries[0]; !strings.Contains(q, "bucket=tanks%2Fautogen") || !strings.Contains(q, "org=acme") || !strings.Contains(q, "precision=ns") {
		t.Errorf("write URL %s", q)
	}
	if err := c.WriteLevels(context.Background(), "m", "f", "tank", "T", []int64{1}, nil); err == nil {
		t.Error("length mismatch: got nil error")
	}
	if err := c.WriteLevels(context.Background(), "m", "f", "tank", "end\\", []int64{1}, []float64{1}); err == nil || !strings.Contains(err.Error(), `"end\\"`) {
		t.Errorf("unrepresentable tank id: got %v", err)
	}
}

func TestWriteRetries(t *testing.T) {
	s, c := newSink(t, 5000, 503, 204)
	if err := c.WriteLevels(context.Background(), "m", "f", "tank", "T", []int64{1}, []float64{1}); err != nil {
		t.Fatalf("503 then 204: %v", err)
	}
	if len(s.bodies) != 2 || s.bodies[0] != s.bodies[1] {
		t.Errorf("got %d requests, want the same batch twice", len(s.bodies))
	}
	s, c = newSink(t, 5000, 400)
	err := c.WriteLevels(context.Background(), "m", "f", "tank", "T", []int64{1}, []float64{1})
	if err == nil || len(s.bodies) != 1 {
		t.Errorf("400: got %v after %d requests, want an error after 1", err, len(s.bodies))
	}
	s, c = newSink(t, 5000, 401)
	err = c.WriteLevels(context.Background(), "m", "f", "tank", "T", []int64{1}, []float64{1})
	var ce *ConfigError
	if !errors.As(err, &ce) || ce.Setting != "token" || len(s.bodies) != 1 {
		t.Errorf("401: got %v after %d requests", err, len(s.bodies))
	}
	s, c = newSink(t, 5000, 503, 503, 503)
	err = c.WriteLevels(context.Background(), "m", "f", "tank", "T", []int64{1}, []float64{1})
	if !errors.Is(err, ErrUnavailable) || len(s.bodies) != 3 {
		t.Errorf("503 x3: got %v after %d requests", err, len(s.bodies))
	}
}

func TestWriteFitsLineProtocol(t *testing.T) {
	s, c := newSink(t, 5000)
	f := model.Fit{
		Tank: "T1", StartNs: 1709251200000000000, EndNs: 1709251800000000000, N: 120, Outliers: 2,
		H0M: 2.5, H1M: 0.25, KM25s: 0.0021, KSEM25s: 1.5e-05, KLo95M25s: 0.00207, KHi95M25s: 0.00213,
		SigmaM: 0.002, R2: 0.999, Exponent: 0.5, ExponentSE: 0.01, DurbinWatson: 1.9, Method: "wls",
		Quality: model.QualityB, QualityReason: "short drain", CdAM2: 0.0005, Cd: math.NaN(), EmptyHeadM: math.NaN(),
	}
	if err := c.WriteFits(context.Background(), "outlet_fit", []model.Fit{f}, "plant-a"); err != nil {
		t.Fatal(err)
	}
	golden(t, "fit.lp", s.bodies[0])
	// The same fit again gives the same line: the server overwrites it.
	if err := c.WriteFits(context.Background(), "outlet_fit", []model.Fit{f}, "plant-a"); err != nil {
		t.Fatal(err)
	}
	if s.bodies[1] != s.bodies[0] {
		t.Errorf("second write differs:\n%s\n%s", s.bodies[1], s.bodies[0])
	}
	if strings.Contains(s.bodies[0], "NaN") || strings.Contains(s.bodies[0], "cd=") {
		t.Errorf("NaN field written: %s", s.bodies[0])
	}
	f.Tank = ""
	if err := c.WriteFits(context.Background(), "outlet_fit", []model.Fit{f}, ""); err == nil {
		t.Error("fit without tank: got nil error")
	}
}

func TestWritePointsSkipsEmpty(t *testing.T) {
	s, c := newSink(t, 5000)
	pts := []Point{
		{Measurement: "finding", Tags: map[string]string{"tank": "T1", "kind": "restriction"},
			Fields: map[string]float64{"z": 4.2, "p": math.NaN()}, StringFields: map[string]string{"state": "open"}, TimeNs: 10},
		{Measurement: "finding", Tags: map[string]string{"tank": "T2"}, Fields: map[string]float64{"z": math.NaN()}, TimeNs: 11},
	}
	if err := c.WritePoints(context.Background(), pts); err != nil {
		t.Fatal(err)
	}
	want := "finding,kind=restriction,tank=T1 state=\"open\",z=4.2 10\n"
	if len(s.bodies) != 1 || s.bodies[0] != want {
		t.Errorf("got %q, want %q", s.bodies, want)
	}
	bad := []Point{{Measurement: "finding", Tags: map[string]string{"tank": "a\nb"}, Fields: map[string]float64{"z": 1}, TimeNs: 1}}
	if err := c.WritePoints(context.Background(), bad); err == nil || !strings.Contains(err.Error(), `"a\nb"`) {
		t.Errorf("newline tank: got %v", err)
	}
}
