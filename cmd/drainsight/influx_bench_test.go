package main

import (
	"bufio"
	"context"
	"fmt"
	"io"
	"math"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"regexp"
	"runtime"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"drainsight/ingest/influx"
)

// The benchmarks below run the real backfill command against a fake
// InfluxDB 1.8 that generates tank levels on the fly, and compare with the
// time to only download the same query results (the floor).
//
//	go test ./cmd/drainsight -run '^$' -bench InfluxScan -benchtime 1x
//
// Plain "go test" never runs them (benchmarks need -bench), and -short
// skips them too.

const (
	benchStepNs  = int64(10e9) // 10 s samples
	benchTankCnt = 50
)

// levelGen is the closed-form level history of one fake tank, in metres of
// depth over a vertical cylinder with its outlet at the bottom: a cycle of
// fill (linear), idle full, gravity drain h = (sqrt(h0) - c t)^2 down to
// hEnd, idle low; each tank has its own period, levels and drain rate, and a
// deterministic noise of about 1 mm.
type levelGen struct {
	periodNs, fillNs, idleNs int64
	h0, hEnd, c              float64
	seed                     uint64
}

func newLevelGen(k int) levelGen {
	g := levelGen{
		periodNs: int64(4+k%7) * 3600e9,
		fillNs:   int64(40+5*(k%5)) * 60e9,
		idleNs:   int64(20+3*(k%4)) * 60e9,
		h0:       3.2 + 0.02*float64(k%10),
		hEnd:     0.25 + 0.01*float64(k%5),
		// c = K/(2A): K = 0.62*pi*(0.075 m)^2*sqrt(2g) over A = pi*(3 m)^2,
		// varied by tank.
		c:    0.62 * math.Pi * 0.075 * 0.075 * math.Sqrt(2*9.80665) / (2 * math.Pi * 9) * (0.8 + 0.01*float64(k%40)),
		seed: uint64(k)*0x9e3779b97f4a7c15 + 1,
	}
	return g
}

func (g levelGen) level(tNs int64) float64 {
	ph := tNs % g.periodNs
	if ph < 0 {
		ph += g.periodNs
	}
	var h float64
	drainS := (math.Sqrt(g.h0) - math.Sqrt(g.hEnd)) / g.c
	switch p := float64(ph) / 1e9; {
	case ph < g.fillNs:
		h = g.hEnd + (g.h0-g.hEnd)*p/(float64(g.fillNs)/1e9)
	case ph < g.fillNs+g.idleNs:
		h = g.h0
	case p < float64(g.fillNs+g.idleNs)/1e9+drainS:
		s := math.Sqrt(g.h0) - g.c*(p-float64(g.fillNs+g.idleNs)/1e9)
		h = s * s
	default:
		h = g.hEnd
	}
	// splitmix64 of (seed, t): noise uniform in [-1, 1) mm.
	z := g.seed + uint64(tNs)*0xbf58476d1ce4e5b9
	z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9
	z = (z ^ (z >> 27)) * 0x94d049bb133111eb
	z ^= z >> 31
	h += (float64(z>>11)/(1<<53)*2 - 1) * 1e-3
	return math.Round(h*1e4) / 1e4
}

var (
	rangeRe = regexp.MustCompile(`range\(start: ([^,]+), stop: ([^)]+)\)`)
	tanksRe = regexp.MustCompile(`r\.tank =~ /\^\(([^)]*)\)\$/`)
)

// fakeInflux answers /api/v2/query like 1.8 (annotated CSV, CRLF, one
// block, one table per tank, range stop included) for the tanks and window
// of the Flux text, and accepts writes. It counts the points it sent.
type fakeInflux struct {
	gens   map[string]levelGen
	points atomic.Int64
}

func newFakeInflux() *fakeInflux {
	f := &fakeInflux{gens: map[string]levelGen{}}
	for k := range benchTankCnt {
		f.gens[benchTankID(k)] = newLevelGen(k)
	}
	return f
}

func benchTankID(k int) string { return fmt.Sprintf("TK-%02d", k+1) }

func (f *fakeInflux) ServeHTTP(w http.ResponseWriter, r *http.Request) {
	body, _ := io.ReadAll(r.Body)
	switch r.URL.Path {
	case "/api/v2/write":
		w.WriteHeader(http.StatusNoContent)
		return
	case "/api/v2/query":
	default:
		http.NotFound(w, r)
		return
	}
	q := string(body)
	m := rangeRe.FindStringSubmatch(q)
	if m == nil {
		http.Error(w, "no range", http.StatusBadRequest)
		return
	}
	start, err1 := time.Parse(time.RFC3339Nano, m[1])
	stop, err2 := time.Parse(time.RFC3339Nano, m[2])
	if err1 != nil || err2 != nil {
		http.Error(w, "bad range", http.StatusBadRequest)
		return
	}
	var tanks []string
	if tm := tanksRe.FindStringSubmatch(q); tm != nil {
		tanks = strings.Split(strings.ReplaceAll(tm[1], `\-`, "-"), "|")
	}
	w.Header().Set("Content-Type", "text/csv; charset=utf-8")
	bw := bufio.NewWriterSize(w, 64<<10)
	bw.WriteString("#datatype,string,long,dateTime:RFC3339,double,string\r\n#group,false,false,false,false,true\r\n#default,_result,,,,\r\n,result,table,_time,_value,tank\r\n")
	first := (start.UnixNano() + benchStepNs - 1) / benchStepNs * benchStepNs
	var line []byte
	n := int64(0)
	dayStart, day := int64(math.MinInt64), []byte(nil)
	for ti, tank := range tanks {
		g, ok := f.gens[tank]
		if !ok {
			continue
		}
		for t := first; t <= stop.UnixNano(); t += benchStepNs { // 1.8: stop included
			if t < dayStart || t >= dayStart+86400e9 {
				dayStart = t - t%int64(86400e9)
				day = time.Unix(0, dayStart).UTC().AppendFormat(day[:0], "2006-01-02T")
			}
			line = append(line[:0], ",,"...)
			line = strconv.AppendInt(line, int64(ti), 10)
			line = append(line, ',')
			line = append(line, day...)
			line = appendClock(line, (t-dayStart)/1e9)
			line = append(line, ',')
			line = appendTenthMM(line, g.level(t))
			line = append(line, ',')
			line = append(line, tank...)
			line = append(line, '\r', '\n')
			bw.Write(line)
			n++
		}
	}
	bw.WriteString("\r\n")
	bw.Flush()
	f.points.Add(n)
}

// appendClock appends "HH:MM:SSZ" for the second of the day s (the times
// are whole seconds, which RFC3339Nano prints without a fraction).
func appendClock(b []byte, s int64) []byte {
	h, m, sec := s/3600, s/60%60, s%60
	return append(b, byte('0'+h/10), byte('0'+h%10), ':', byte('0'+m/10), byte('0'+m%10), ':',
		byte('0'+sec/10), byte('0'+sec%10), 'Z')
}

// appendTenthMM appends v, a multiple of 0.1 mm, as strconv.FormatFloat(v,
// 'f', -1, 64) would: no trailing zeros.
func appendTenthMM(b []byte, v float64) []byte {
	x := int64(math.Round(v * 1e4))
	if x < 0 {
		b = append(b, '-')
		x = -x
	}
	b = strconv.AppendInt(b, x/1e4, 10)
	frac := x % 1e4
	if frac == 0 {
		return b
	}
	d := [4]byte{byte('0' + frac/1000), byte('0' + frac/100%10), byte('0' + frac/10%10), byte('0' + frac%10)}
	k := 4
	for d[k-1] == '0' {
		k--
	}
	b = append(b, '.')
	return append(b, d[:k]...)
}

// benchConfig writes a configuration with one site on url and the 50 tanks.
func benchConfig(b *testing.B, dir, url string) string {
	var s strings.Builder
	fmt.Fprintf(&s, "sites:\n  - id: bench-site\n    description: generated levels\n    influx:\n      url: %s\n      bucket: \"tanks/autogen\"\n      query_window: 24 h\n      settle_delay: 0 s\n\ntanks:\n", url)
	for k := range benchTankCnt {
		fmt.Fprintf(&s, "  - id: %s\n    site: bench-site\n    geometry:\n      shape: vertical_cylinder\n      diameter: 6 m\n      height: 4 m\n", benchTankID(k))
		fmt.Fprintf(&s, "    outlet:\n      diameter: 150 mm\n      elevation: 0 m\n    sensor:\n      kind: depth\n      unit: m\n    source:\n      format: influx\n")
	}
	path := filepath.Join(dir, "bench.yaml")
	if err := os.WriteFile(path, []byte(s.String()), 0o644); err != nil {
		b.Fatal(err)
	}
	return path
}

// peakMem samples the runtime's memory every 100 ms until stop is called,
// which returns the largest HeapInuse and Sys seen, in MB.
func peakMem() (stop func() (heapMB, sysMB float64)) {
	var mu sync.Mutex
	var heap, sys uint64
	sample := func() {
		var ms runtime.MemStats
		runtime.ReadMemStats(&ms)
		mu.Lock()
		heap, sys = max(heap, ms.HeapInuse), max(sys, ms.Sys)
		mu.Unlock()
	}
	done := make(chan struct{})
	var wg sync.WaitGroup
	wg.Add(1)
	go func() {
		defer wg.Done()
		tk := time.NewTicker(100 * time.Millisecond)
		defer tk.Stop()
		for {
			select {
			case <-done:
				return
			case <-tk.C:
				sample()
			}
		}
	}()
	return func() (float64, float64) {
		close(done)
		wg.Wait()
		sample()
		return float64(heap) / 1e6, float64(sys) / 1e6
	}
}

func benchInfluxScan(b *testing.B, since, until string) {
	if testing.Short() {
		b.Skip("long benchmark; not with -short")
	}
	f := newFakeInflux()
	srv := httptest.NewServer(f)
	defer srv.Close()
	dir := b.TempDir()
	cfg := benchConfig(b, dir, srv.URL)
	var points int64
	var heapMB, sysMB float64
	runtime.GC()
	for b.Loop() {
		run1 := filepath.Join(dir, fmt.Sprintf("run%d", b.N))
		os.RemoveAll(run1)
		if err := os.MkdirAll(run1, 0o755); err != nil {
			b.Fatal(err)
		}
		f.points.Store(0)
		stopMem := peakMem()
		err := run(context.Background(), []string{"backfill", "--new-state", "--config", cfg, "--since", since, "--until", until,
			"--state", filepath.Join(run1, "state.db"), "--out", run1}, io.Discard, io.Discard)
		h, s := stopMem()
		heapMB, sysMB = max(heapMB, h), max(sysMB, s)
		if err != nil {
			b.Fatal(err)
		}
		points += f.points.Load()
		os.RemoveAll(run1)
	}
	scanS := b.Elapsed().Seconds()
	b.ReportMetric(float64(points)/scanS, "points/s")
	b.ReportMetric(sysMB, "peak-MB")
	b.ReportMetric(heapMB, "peak-heap-MB")

	// The floor: the same queries, each body read to io.Discard.
	floorS, floorPts := downloadFloor(b, srv.URL, since, until, false)
	b.ReportMetric(floorPts/floorS, "floor-points/s")
	b.ReportMetric(scanS/float64(b.N)/floorS, "scan/floor")
	// Source.Pull alone (no processing): what the reader adds to the floor.
	pullS, pullPts := downloadFloor(b, srv.URL, since, until, true)
	b.ReportMetric(pullPts/pullS, "pull-points/s")
	b.ReportMetric(pullS/floorS, "pull/floor")
}

// downloadFloor sends the queries the backfill sends (one per 24 h window
// for the 50 tanks) and reads every body to io.Discard, or, with pull, runs
// Source.Pull on each window with a callback that only sums. It returns the
// time taken and the points in the windows.
func downloadFloor(b *testing.B, url, since, until string, pull bool) (seconds, points float64) {
	from, err1 := parseDay(since)
	to, err2 := parseDay(until)
	if err1 != nil || err2 != nil {
		b.Fatal(err1, err2)
	}
	c, err := influx.New(influx.Conn{URL: url, Bucket: "tanks/autogen"}, influx.Options{})
	if err != nil {
		b.Fatal(err)
	}
	defer c.Close()
	src, err := c.Source(influx.SeriesSpec{Measurement: "tank_level", Field: "level"})
	if err != nil {
		b.Fatal(err)
	}
	ids := make([]string, benchTankCnt)
	for k := range ids {
		ids[k] = benchTankID(k)
	}
	hc := &http.Client{}
	var n int64
	t := time.Now()
	var sum float64
	for _, w := range influx.Windows(from.UnixNano(), to.UnixNano(), 24*time.Hour) {
		n += int64(benchTankCnt) * (w[1] - w[0]) / benchStepNs
		if pull {
			got, err := src.Pull(context.Background(), ids, w[0], w[1], func(_ string, _ int64, v float64) { sum += v })
			if err != nil || int64(got) != int64(benchTankCnt)*(w[1]-w[0])/benchStepNs {
				b.Fatalf("pull: %d points, %v", got, err)
			}
			continue
		}
		body := fmt.Sprintf(`{"query":%q}`, src.Flux(ids, w[0], w[1]))
		resp, err := hc.Post(url+"/api/v2/query", "application/json", strings.NewReader(body))
		if err != nil {
			b.Fatal(err)
		}
		if _, err := io.Copy(io.Discard, resp.Body); err != nil {
			b.Fatal(err)
		}
		resp.Body.Close()
	}
	return time.Since(t).Seconds(), float64(n)
}

// BenchmarkInfluxScanYear50Tanks backfills a year of 10 s levels of 50 tanks
// (157.7 million points) from the fake server.
func BenchmarkInfluxScanYear50Tanks(b *testing.B) {
	benchInfluxScan(b, "2025-01-01", "2026-01-01")
}

// BenchmarkInfluxScan30Days50Tanks is the same over 30 days (13 million
// points), for a quicker look.
func BenchmarkInfluxScan30Days50Tanks(b *testing.B) {
	benchInfluxScan(b, "2025-01-01", "2025-01-31")
}

// TestBenchFormatting checks the fake server's hand formatting against the
// standard library's.
func TestBenchFormatting(t *testing.T) {
	for _, v := range []float64{0, 1, 3.2, 0.2501, -0.0003, 12.5, 3.14159} {
		v = math.Round(v*1e4) / 1e4
		if got, want := string(appendTenthMM(nil, v)), strconv.FormatFloat(v, 'f', -1, 64); got != want {
			t.Errorf("appendTenthMM(%v) = %s, want %s", v, got, want)
		}
	}
	for _, s := range []int64{0, 59, 3600, 86399} {
		tt := time.Unix(s, 0).UTC()
		if got, want := "1970-01-01T"+string(appendClock(nil, s)), tt.Format(time.RFC3339Nano); got != want {
			t.Errorf("appendClock(%d) = %s, want %s", s, got, want)
		}
	}
}
