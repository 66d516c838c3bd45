package influx

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"net/http"
	"net/http/httptest"
	"os"
	"strings"
	"testing"
	"time"
)

// benchCSV is an annotated-CSV answer shaped exactly like 1.8.10's for the
// pull query (checked with curl against the test server): CRLF line ends, one
// annotation block, the tanks' tables one after another with the table
// number counting up; rows samples per tank, 10 s apart.
func benchCSV(tanks, rows int) string {
	var b strings.Builder
	b.WriteString("#datatype,string,long,dateTime:RFC3339,double,string\r\n#group,false,false,false,false,true\r\n#default,_result,,,,\r\n,result,table,_time,_value,tank\r\n")
	for k := range tanks {
		for i := range rows {
			ts := time.Unix(0, t0+int64(i)*10e9).UTC().Format(time.RFC3339Nano)
			fmt.Fprintf(&b, ",,%d,%s,%.4f,T%d\r\n", k, ts, 2.5-float64(i)*1e-5, k+1)
		}
	}
	b.WriteString("\r\n")
	return b.String()
}

func benchServer(b *testing.B, body string) *httptest.Server {
	srv := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		w.Header().Set("Content-Type", "text/csv; charset=utf-8")
		io.WriteString(w, body)
	}))
	b.Cleanup(srv.Close)
	return srv
}

const benchTanks, benchRows = 2, 100_000

// pullBench is one Pull of the bench body; it fails the benchmark unless
// every sample arrives.
func pullBench(b *testing.B, s *Source, sum *float64) {
	n, err := s.Pull(context.Background(), []string{"T1", "T2"}, t0, t0+int64(benchRows)*10e9,
		func(_ string, _ int64, v float64) { *sum += v })
	if err != nil || n != benchTanks*benchRows {
		b.Fatalf("n=%d err=%v", n, err)
	}
}

// floorBench downloads the bench body to io.Discard with a plain client.
func floorBench(b *testing.B, hc *http.Client, url string) {
	resp, err := hc.Post(url+"/api/v2/query", "application/json", strings.NewReader(`{"query":"x"}`))
	if err != nil {
		b.Fatal(err)
	}
	if _, err := io.Copy(io.Discard, resp.Body); err != nil {
		b.Fatal(err)
	}
	resp.Body.Close()
}

func benchSource(b *testing.B, url string) *Source {
	c, err := New(Conn{URL: url, Bucket: "tanks/autogen"}, Options{})
	if err != nil {
		b.Fatal(err)
	}
	b.Cleanup(c.Close)
	s, err := c.Source(SeriesSpec{Measurement: "tank_level", Field: "level"})
	if err != nil {
		b.Fatal(err)
	}
	return s
}

// BenchmarkPull parses a streamed response through Source.Pull;
// BenchmarkPullDownloadFloor reads the same response to io.Discard;
// BenchmarkPullOverFloor does both in turn and reports the ratio of their
// times ("pull/floor"), which is the cost of parsing and delivering.
func BenchmarkPull(b *testing.B) {
	body := benchCSV(benchTanks, benchRows)
	s := benchSource(b, benchServer(b, body).URL)
	b.SetBytes(int64(len(body)))
	b.ReportAllocs()
	var sum float64
	for b.Loop() {
		pullBench(b, s, &sum)
	}
	b.ReportMetric(float64(benchTanks*benchRows)*float64(b.N)/b.Elapsed().Seconds(), "points/s")
}

func BenchmarkPullDownloadFloor(b *testing.B) {
	body := benchCSV(benchTanks, benchRows)
	srv := benchServer(b, body)
	hc := &http.Client{}
	b.SetBytes(int64(len(body)))
	b.ReportAllocs()
	for b.Loop() {
		floorBench(b, hc, srv.URL)
	}
	b.ReportMetric(float64(benchTanks*benchRows)*float64(b.N)/b.Elapsed().Seconds(), "points/s")
}

func BenchmarkPullOverFloor(b *testing.B) {
	body := benchCSV(benchTanks, benchRows)
	srv := benchServer(b, body)
	s := benchSource(b, srv.URL)
	hc := &http.Client{}
	var pullD, floorD time.Duration
	var sum float64
	for b.Loop() {
		t := time.Now()
		floorBench(b, hc, srv.URL)
		floorD += time.Since(t)
		t = time.Now()
		pullBench(b, s, &sum)
		pullD += time.Since(t)
	}
	b.ReportMetric(pullD.Seconds()/floorD.Seconds(), "pull/floor")
	b.ReportMetric(float64(benchTanks*benchRows)*float64(b.N)/pullD.Seconds(), "pull-points/s")
	b.ReportMetric(float64(benchTanks*benchRows)*float64(b.N)/floorD.Seconds(), "floor-points/s")
}

// BenchmarkCSVRows is the reader alone over an in-memory body: the CPU cost
// of parsing per point, without HTTP.
func BenchmarkCSVRows(b *testing.B) {
	body := []byte(benchCSV(benchTanks, benchRows))
	b.SetBytes(int64(len(body)))
	b.ReportAllocs()
	rd := bytes.NewReader(body)
	var sum float64
	for b.Loop() {
		rd.Reset(body)
		rows := newCSVRows(rd, "tank")
		n := 0
		for {
			_, _, v, ok, err := rows.next()
			if err != nil {
				b.Fatal(err)
			}
			if !ok {
				break
			}
			sum += v
			n++
		}
		if n != benchTanks*benchRows {
			b.Fatalf("n=%d", n)
		}
	}
	b.ReportMetric(b.Elapsed().Seconds()*1e9/float64(b.N*benchTanks*benchRows), "ns/point")
}

// BenchmarkIntegrationPullOverFloor compares Pull with the download of the
// same query result from the real 1.8 server started by
//
//	scripts/influxd.sh run -- go test ./ingest/influx/ -run '^$' -bench Integration
//
// for 10 tanks × 2 days of 10 s samples, with the result plain and gzipped.
func BenchmarkIntegrationPullOverFloor(b *testing.B) {
	u := os.Getenv("DRAINSIGHT_INFLUX_URL")
	if u == "" {
		b.Skip("needs the test server of scripts/influxd.sh")
	}
	conn := Conn{URL: u, Bucket: os.Getenv("DRAINSIGHT_INFLUX_BUCKET"), Token: os.Getenv("DRAINSIGHT_INFLUX_TOKEN")}
	ctx := context.Background()
	const tanks, rows = 10, 2 * 8640
	c, err := New(conn, Options{})
	if err != nil {
		b.Fatal(err)
	}
	defer c.Close()
	meas := "bench_pull"
	var ids []string
	for k := range tanks {
		id := fmt.Sprintf("T%02d", k)
		ids = append(ids, id)
		ts, vs := make([]int64, rows), make([]float64, rows)
		for i := range rows {
			ts[i], vs[i] = t0+int64(i)*10e9, math.Round((3-float64(i%500)*0.005+float64(k)*0.01)*1e4)/1e4
		}
		if err := c.WriteLevels(ctx, meas, "level", "tank", id, ts, vs); err != nil {
			b.Fatal(err)
		}
	}
	stop := t0 + int64(rows)*10e9
	for _, gz := range []bool{false, true} {
		b.Run(fmt.Sprintf("gzip=%v", gz), func(b *testing.B) {
			c, err := New(conn, Options{QueryGzip: gz})
			if err != nil {
				b.Fatal(err)
			}
			defer c.Close()
			s, _ := c.Source(SeriesSpec{Measurement: meas, Field: "level"})
			reqBody, _ := json.Marshal(queryRequest{Query: s.Flux(ids, t0, stop), Type: "flux", Dialect: queryDialect{
				Annotations: []string{"datatype", "group", "default"}, Delimiter: ",", Header: true}})
			hc := &http.Client{}
			var pullD, floorD time.Duration
			var sum float64
			for b.Loop() {
				t := time.Now()
				req, _ := http.NewRequest("POST", c.queryURL, bytes.NewReader(reqBody))
				req.Header.Set("Authorization", "Token "+conn.Token)
				req.Header.Set("Content-Type", "application/json")
				if gz {
					req.Header.Set("Accept-Encoding", "gzip") // counted compressed: the floor does not inflate
				} else {
					req.Header.Set("Accept-Encoding", "identity")
				}
				resp, err := hc.Do(req)
				if err != nil {
					b.Fatal(err)
				}
				io.Copy(io.Discard, resp.Body)
				resp.Body.Close()
				floorD += time.Since(t)
				t = time.Now()
				n, err := s.Pull(ctx, ids, t0, stop, func(_ string, _ int64, v float64) { sum += v })
				if err != nil || n != tanks*rows {
					b.Fatalf("n=%d err=%v", n, err)
				}
				pullD += time.Since(t)
			}
			b.ReportMetric(pullD.Seconds()/floorD.Seconds(), "pull/floor")
			b.ReportMetric(float64(tanks*rows)*float64(b.N)/pullD.Seconds(), "pull-points/s")
			b.ReportMetric(float64(tanks*rows)*float64(b.N)/floorD.Seconds(), "floor-points/s")
		})
	}
}
