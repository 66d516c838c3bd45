package influx

import (
	"context"
	"fmt"
	"io"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"
	"time"
)

// benchCSV is an annotated-CSV answer shaped like 1.8's for the pull query:
// tanks tables of rows samples each, 1 s apart.
func benchCSV(tanks, rows int) string {
	var b strings.Builder
	for k := range tanks {
		b.WriteString("#datatype,string,long,dateTime:RFC3339,double,string\n#group,false,false,false,false,true\n#default,_result,,,,\n,result,table,_time,_value,tank\n")
		for i := range rows {
			ts := time.Unix(0, t0+int64(i)*1e9).UTC().Format(time.RFC3339Nano)
			fmt.Fprintf(&b, ",,%d,%s,%.4f,T%d\n", k, ts, 2.5-float64(i)*1e-5, k+1)
		}
		b.WriteString("\n")
	}
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

// BenchmarkPull parses a streamed response through Source.Pull;
// BenchmarkPullDownloadFloor reads the same response to io.Discard. Their
// ratio is the cost of parsing.
func BenchmarkPull(b *testing.B) {
	const tanks, rows = 2, 100_000
	body := benchCSV(tanks, rows)
	srv := benchServer(b, body)
	c, err := New(Conn{URL: srv.URL, Bucket: "tanks/autogen"}, Options{})
	if err != nil {
		b.Fatal(err)
	}
	defer c.Close()
	s, _ := c.Source(SeriesSpec{Measurement: "tank_level", Field: "level"})
	b.SetBytes(int64(len(body)))
	var sum float64
	for b.Loop() {
		n, err := s.Pull(context.Background(), []string{"T1", "T2"}, t0, t0+int64(rows)*1e9, func(_ string, _ int64, v float64) { sum += v })
		if err != nil || n != tanks*rows {
			b.Fatalf("n=%d err=%v", n, err)
		}
	}
	b.ReportMetric(float64(tanks*rows)*float64(b.N)/b.Elapsed().Seconds(), "points/s")
}

func BenchmarkPullDownloadFloor(b *testing.B) {
	const tanks, rows = 2, 100_000
	body := benchCSV(tanks, rows)
	srv := benchServer(b, body)
	hc := &http.Client{}
	b.SetBytes(int64(len(body)))
	for b.Loop() {
		resp, err := hc.Post(srv.URL+"/api/v2/query", "application/json", strings.NewReader(`{"query":"x"}`))
		if err != nil {
			b.Fatal(err)
		}
		if _, err := io.Copy(io.Discard, resp.Body); err != nil {
			b.Fatal(err)
		}
		resp.Body.Close()
	}
	b.ReportMetric(float64(tanks*rows)*float64(b.N)/b.Elapsed().Seconds(), "points/s")
}
