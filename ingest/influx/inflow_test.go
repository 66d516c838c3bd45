package influx

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"reflect"
	"strings"
	"testing"
	"time"
)

// pairRow is a row of the pivoted reader; inflow as its bits so that NaN
// compares equal to NaN in reflect.DeepEqual.
type pairRow struct {
	tank   string
	t      int64
	level  float64
	inflow uint64
}

var nan = math.Float64bits(math.NaN())

func bitsOf(v float64) uint64 { return math.Float64bits(v) }

func readPairs(body io.Reader, noFast bool) ([]pairRow, error) {
	rows := newCSVPairRows(body, "tank", "level", "inflow")
	rows.noFast = noFast
	var out []pairRow
	for {
		tank, t, v, a, ok, err := rows.nextPair()
		if err != nil || !ok {
			return out, err
		}
		if math.IsNaN(a) {
			a = math.NaN() // one NaN bit pattern
		}
		out = append(out, pairRow{string(tank), t, v, math.Float64bits(a)})
	}
}

// pivotHdr is the block 1.8.10 sends for the PullWithInflow query when a
// tank has both fields in the window (captured from the server: columns
// after the pivot come in field-name order, so inflow before level).
const pivotHdr = "#datatype,string,long,dateTime:RFC3339,string,double,double\r\n#group,false,false,false,true,false,false\r\n#default,_result,,,,,\r\n,result,table,_time,tank,inflow,level\r\n"

// levelOnlyHdr is the block for a tank without inflow readings in the
// window: no inflow column at all.
const levelOnlyHdr = "#datatype,string,long,dateTime:RFC3339,string,double\r\n#group,false,false,false,true,false\r\n#default,_result,,,,\r\n,result,table,_time,tank,level\r\n"

func TestCSVPairRows(t *testing.T) {
	tests := []struct {
		name string
		body string
		want []pairRow
		err  string
	}{
		{"1.8 shape: rows with and without inflow; an inflow-only row is skipped", pivotHdr +
			",,0,2024-03-01T00:00:00Z,T1,0.25,1.5\r\n,,0,2024-03-01T00:00:10Z,T1,,1.25\r\n,,0,2024-03-01T00:00:20Z,T1,2,1\r\n,,0,2024-03-01T00:00:30Z,T1,0.75,\r\n\r\n",
			[]pairRow{{"T1", t0, 1.5, bitsOf(0.25)}, {"T1", t0 + 10e9, 1.25, nan}, {"T1", t0 + 20e9, 1, bitsOf(2)}}, ""},
		{"a table without the inflow column: inflow NaN", levelOnlyHdr + ",,1,2024-03-01T00:00:00Z,T2,3\r\n\r\n",
			[]pairRow{{"T2", t0, 3, nan}}, ""},
		{"a table without the level column is skipped",
			"#datatype,string,long,dateTime:RFC3339,string,double\n#group,false,false,false,true,false\n#default,_result,,,,\n,result,table,_time,tank,inflow\n,,2,2024-03-01T00:00:00Z,T3,1\n",
			nil, ""},
		{"long level, unsignedLong inflow, other column order, LF",
			"#datatype,string,long,string,unsignedLong,dateTime:RFC3339,long\n#group,false,false,true,false,false,false\n#default,_result,,,,,\n,result,table,tank,inflow,_time,level\n" +
				",,0,A,7,2024-03-01T00:00:01Z,-2\n,,0,A,,2024-03-01T00:00:02Z,4\n",
			[]pairRow{{"A", t0 + 1e9, -2, bitsOf(7)}, {"A", t0 + 2e9, 4, nan}}, ""},
		{"a string inflow reads NaN; a string level skips the row",
			"#datatype,string,long,dateTime:RFC3339,string,string,double\n#group,false,false,false,true,false,false\n#default,_result,,,,,\n,result,table,_time,tank,inflow,level\n" +
				",,0,2024-03-01T00:00:00Z,T1,high,1\n\n" +
				"#datatype,string,long,dateTime:RFC3339,string,double,string\n#group,false,false,false,true,false,false\n#default,_result,,,,,\n,result,table,_time,tank,inflow,level\n" +
				",,1,2024-03-01T00:00:00Z,T2,1,full\n",
			[]pairRow{{"T1", t0, 1, nan}}, ""},
		{"_value is not the level column after a pivot",
			"#datatype,string,long,dateTime:RFC3339,string,double\n#group,false,false,false,true,false\n#default,_result,,,,\n,result,table,_time,tank,_value\n,,0,2024-03-01T00:00:00Z,T1,1\n",
			nil, ""},
		{"quoted tank and an inflow default", "#datatype,string,long,dateTime:RFC3339,string,double,double\n#group,false,false,false,true,false,false\n#default,_result,,,,0.5,\n,result,table,_time,tank,inflow,level\n" +
			",,0,2024-03-01T00:00:00Z,\"a,b\",,2\n",
			[]pairRow{{"a,b", t0, 2, bitsOf(0.5)}}, ""},
		{"bad inflow names the column", pivotHdr + ",,0,2024-03-01T00:00:00Z,T1,1.2.3,1\r\n", nil, `line 5: inflow: strconv.ParseFloat: parsing "1.2.3"`},
		{"bad level names the column", pivotHdr + ",,0,2024-03-01T00:00:00Z,T1,1,x\r\n", nil, `line 5: level: strconv.ParseFloat: parsing "x"`},
		{"in-band error", pivotHdr + ",,0,2024-03-01T00:00:00Z,T1,1,1\r\n\r\n#datatype,string,string\r\n#group,true,true\r\n#default,,\r\n,error,reference\r\n,pivot failed,\r\n",
			[]pairRow{{"T1", t0, 1, bitsOf(1)}}, "query error in the result: pivot failed"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			got, err := readPairs(strings.NewReader(tc.body), false)
			if tc.err == "" && err != nil || tc.err != "" && (err == nil || !strings.Contains(err.Error(), tc.err)) {
				t.Fatalf("err = %v, want %q", err, tc.err)
			}
			if !reflect.DeepEqual(got, tc.want) {
				t.Errorf("got %v, want %v", got, tc.want)
			}
			got2, err2 := readPairs(strings.NewReader(tc.body), true)
			if !reflect.DeepEqual(got2, got) || fmt.Sprint(err2) != fmt.Sprint(err) {
				t.Errorf("general path only: got %v, %v; want %v, %v", got2, err2, got, err)
			}
			got1, err1 := readPairs(&oneByteReader{strings.NewReader(tc.body)}, false)
			if !reflect.DeepEqual(got1, got) || fmt.Sprint(err1) != fmt.Sprint(err) {
				t.Errorf("byte by byte: got %v, %v; want %v, %v", got1, err1, got, err)
			}
		})
	}
}

// pivotCSV renders n rows per tank in the 1.8 pivoted shape; every third row
// has no inflow.
func pivotCSV(tanks, n int) string {
	var b strings.Builder
	for k := range tanks {
		b.WriteString(pivotHdr)
		for i := range n {
			in := fmt.Sprintf("%d.%03d", i%7, i%1000)
			if i%3 == 0 {
				in = ""
			}
			fmt.Fprintf(&b, ",,%d,%s,T%d,%s,%d.%04d\r\n", k, fluxTime(t0+int64(i)*10e9), k, in, 2-i%2, i%10000)
		}
		b.WriteString("\r\n")
	}
	return b.String()
}

// TestCSVPairRowsNoAllocPerRow: the allocations of a pivoted read do not
// grow with the number of rows.
func TestCSVPairRowsNoAllocPerRow(t *testing.T) {
	allocs := func(n int) float64 {
		body := []byte(pivotCSV(2, n))
		rd := bytes.NewReader(body)
		return testing.AllocsPerRun(5, func() {
			rd.Reset(body)
			rows := newCSVPairRows(rd, "tank", "level", "inflow")
			for {
				_, _, _, _, ok, err := rows.nextPair()
				if err != nil {
					t.Fatal(err)
				}
				if !ok {
					break
				}
			}
		})
	}
	if small, large := allocs(10), allocs(20_000); large != small {
		t.Errorf("allocations: %v for 20 rows, %v for 40000 rows; want the same", small, large)
	}
}

// FuzzCSVPairRows: on any body the pivoted reader must not panic and must
// give the same rows however the input is split into reads and with its fast
// path off.
func FuzzCSVPairRows(f *testing.F) {
	f.Add([]byte(pivotHdr + ",,0,2024-03-01T00:00:00Z,T1,0.25,1.5\r\n,,0,2024-03-01T00:00:10Z,T1,,1.25\r\n,,0,2024-03-01T00:00:30Z,T1,0.75,\r\n\r\n" +
		levelOnlyHdr + ",,1,2024-03-01T00:00:00Z,T2,3\r\n"))
	f.Add([]byte("#datatype,string,long,string,unsignedLong,dateTime:RFC3339,long\n#group,false,false,true,false,false,false\n#default,_result,,,,,\n,result,table,tank,inflow,_time,level\n,,0,\"A\"\"\",7,2024-03-01T00:00:01Z,-2\n"))
	f.Add([]byte(pivotCSV(2, 5)))
	f.Fuzz(func(t *testing.T, body []byte) {
		got, err := readPairs(bytes.NewReader(body), false)
		got1, err1 := readPairs(&oneByteReader{bytes.NewReader(body)}, false)
		if !reflect.DeepEqual(got, got1) && !(len(got) == 0 && len(got1) == 0) || fmt.Sprint(err) != fmt.Sprint(err1) {
			t.Errorf("whole: %v, %v; byte by byte: %v, %v", got, err, got1, err1)
		}
		got2, err2 := readPairs(bytes.NewReader(body), true)
		if !reflect.DeepEqual(got, got2) && !(len(got) == 0 && len(got2) == 0) || fmt.Sprint(err) != fmt.Sprint(err2) {
			t.Errorf("fast path: %v, %v; general path only: %v, %v", got, err, got2, err2)
		}
	})
}

func TestPullInflowFluxGolden(t *testing.T) {
	start := int64(1709251200000000000) // 2024-03-01T00:00:00Z
	s := testSource(t, SeriesSpec{Measurement: "tank_level", Field: "level", InflowField: "inflow",
		Tags: map[string]string{"site": "plant-a"}})
	golden(t, "pull_inflow.flux", s.FluxWithInflow([]string{"T2", "T1", "T2"}, start, start+86400e9+1))
	// Field names that are Flux keywords, hold quotes, ${ and spaces.
	hostile := testSource(t, SeriesSpec{Measurement: `lvl "x" ${m}`, Field: `and`, InflowField: `in "flow" ${q} m3/s`,
		TankTag: "tank id", Tags: map[string]string{"si/te": "${site}"}})
	golden(t, "pull_inflow_hostile.flux", hostile.FluxWithInflow(hostileIDs[:3], start, start+3600e9))
	// Without an inflow field, PullWithInflow sends Pull's query.
	plain := testSource(t, SeriesSpec{Measurement: "tank_level", Field: "level", Tags: map[string]string{"site": "plant-a"}})
	if got, want := plain.FluxWithInflow([]string{"T1"}, start, start+1), plain.Flux([]string{"T1"}, start, start+1); got != want {
		t.Errorf("no inflow field: got\n%s\nwant Pull's query\n%s", got, want)
	}
}

func TestSourceInflowSpecErrors(t *testing.T) {
	c, _ := New(Conn{URL: "http://127.0.0.1:1", Bucket: "b"}, Options{})
	defer c.Close()
	for _, spec := range []SeriesSpec{
		{Measurement: "m", Field: "level", InflowField: "level"},
		{Measurement: "m", Field: "level", InflowField: "_value"},
		{Measurement: "m", Field: "_level", InflowField: "inflow"},
		{Measurement: "m", Field: "level", InflowField: "tank"},
		{Measurement: "m", Field: "level", InflowField: "q", TankTag: "q"},
		{Measurement: "m", Field: "level", InflowField: "site", Tags: map[string]string{"site": "a"}},
		{Measurement: "m", Field: "table", InflowField: "inflow"},
		{Measurement: "m", Field: "level", InflowField: "result"},
	} {
		if _, err := c.Source(spec); err == nil {
			t.Errorf("Source(%+v): got nil error", spec)
		}
	}
	// Without an inflow field those names stay allowed for Pull.
	if _, err := c.Source(SeriesSpec{Measurement: "m", Field: "_level"}); err != nil {
		t.Errorf("Pull-only spec with field _level: %v", err)
	}
}

type inflowGot struct {
	tank   string
	t      int64
	level  float64
	inflow uint64 // bits
}

func pullInflowOnce(t *testing.T, c *Client, spec SeriesSpec, start, stop int64) ([]inflowGot, int, error) {
	t.Helper()
	s, err := c.Source(spec)
	if err != nil {
		t.Fatal(err)
	}
	var out []inflowGot
	n, err := s.PullWithInflow(context.Background(), []string{"T1", "T2"}, start, stop, func(tank string, tNs int64, level, inflow float64) {
		if math.IsNaN(inflow) {
			inflow = math.NaN()
		}
		out = append(out, inflowGot{tank, tNs, level, math.Float64bits(inflow)})
	})
	return out, n, err
}

var inflowSpec = SeriesSpec{Measurement: "tank_level", Field: "level", InflowField: "inflow"}

func TestPullWithInflow(t *testing.T) {
	body := pivotHdr +
		",,0,2024-03-01T00:00:00Z,T1,0.25,1.5\r\n,,0,2024-03-01T00:00:10Z,T1,,1.25\r\n,,0,2024-03-01T00:00:20Z,T1,0.5,\r\n" +
		",,0,2024-03-01T00:01:00Z,T1,9,9\r\n\r\n" + // at stop: 1.8 includes it, we drop it
		levelOnlyHdr + ",,1,2024-03-01T00:00:05Z,T2,7\r\n\r\n"
	f, c, _ := newFake(t, body)
	out, n, err := pullInflowOnce(t, c, inflowSpec, t0, t1)
	if err != nil {
		t.Fatal(err)
	}
	want := []inflowGot{{"T1", t0, 1.5, bitsOf(0.25)}, {"T1", t0 + 10e9, 1.25, nan}, {"T2", t0 + 5e9, 7, nan}}
	if !reflect.DeepEqual(out, want) || n != len(want) {
		t.Errorf("got %v (n=%d), want %v", out, n, want)
	}
	var req struct{ Query string }
	if err := json.Unmarshal([]byte(strings.TrimPrefix(f.reqs[0], "/api/v2/query ")), &req); err != nil {
		t.Fatal(err)
	}
	for _, s := range []string{`(r._field == "level" or r._field == "inflow")`, `|> pivot(rowKey: ["_time"], columnKey: ["_field"], valueColumn: "_value")`,
		`keep(columns: ["_time", "tank", "level", "inflow"])`, `r.tank =~ /^(T1|T2)$/`} {
		if !strings.Contains(req.Query, s) {
			t.Errorf("query lacks %s:\n%s", s, req.Query)
		}
	}
}

// TestPullWithInflowNoInflowField: without an InflowField the level query
// of Pull runs and inflow is NaN.
func TestPullWithInflowNoInflowField(t *testing.T) {
	f, c, _ := newFake(t, csvTable(0, "double", "T1", [][2]string{{"2024-03-01T00:00:00Z", "1.5"}}))
	out, n, err := pullInflowOnce(t, c, SeriesSpec{Measurement: "tank_level", Field: "level"}, t0, t1)
	if err != nil {
		t.Fatal(err)
	}
	if want := []inflowGot{{"T1", t0, 1.5, nan}}; !reflect.DeepEqual(out, want) || n != 1 {
		t.Errorf("got %v (n=%d), want %v", out, n, want)
	}
	if strings.Contains(f.reqs[0], "pivot") {
		t.Errorf("request holds a pivot: %s", f.reqs[0])
	}
}

// TestPullWithInflowResumesAfterCut cuts the stream inside the rows at 10 s
// (two series of T1 share that time); the retry must deliver only the rest.
func TestPullWithInflowResumesAfterCut(t *testing.T) {
	full := pivotHdr +
		",,0,2024-03-01T00:00:00Z,T1,0.25,1\r\n,,0,2024-03-01T00:00:10Z,T1,0.5,2\r\n,,0,2024-03-01T00:00:10Z,T1,,2.5\r\n" +
		",,0,2024-03-01T00:00:20Z,T1,,3\r\n,,0,2024-03-01T00:00:30Z,T1,1,4\r\n\r\n" +
		levelOnlyHdr + ",,1,2024-03-01T00:00:00Z,T2,1\r\n"
	cutAt := strings.Index(full, ",,0,2024-03-01T00:00:10Z,T1,,2.5") // after the first row at 10 s
	f, c, waits := newFake(t, "cut:"+full[:cutAt], full)
	out, n, err := pullInflowOnce(t, c, inflowSpec, t0, t1)
	if err != nil {
		t.Fatal(err)
	}
	want := []inflowGot{
		{"T1", t0, 1, bitsOf(0.25)}, {"T1", t0 + 10e9, 2, bitsOf(0.5)}, {"T1", t0 + 10e9, 2.5, nan},
		{"T1", t0 + 20e9, 3, nan}, {"T1", t0 + 30e9, 4, bitsOf(1)}, {"T2", t0, 1, nan},
	}
	if !reflect.DeepEqual(out, want) || n != len(want) {
		t.Errorf("got %v (n=%d), want %v", out, n, want)
	}
	if f.hits != 2 || !reflect.DeepEqual(*waits, []time.Duration{500 * time.Millisecond}) {
		t.Errorf("hits %d, waits %v; want 2, [500ms]", f.hits, *waits)
	}
}

// TestPullWithInflowErrors: an in-band error is returned at once, a 401 is
// a *ConfigError, and 503s exhaust the retries into ErrUnavailable.
func TestPullWithInflowErrors(t *testing.T) {
	_, c, _ := newFake(t, pivotHdr+",,0,2024-03-01T00:00:00Z,T1,1,1\r\n\r\n#datatype,string,string\r\n#group,true,true\r\n#default,,\r\n,error,reference\r\n,boom,1\r\n")
	if _, n, err := pullInflowOnce(t, c, inflowSpec, t0, t1); err == nil || !strings.Contains(err.Error(), "boom") || n != 1 {
		t.Errorf("in-band error: got n=%d, %v", n, err)
	}
	_, c, _ = newFake(t, "status:401 unauthorized access")
	var ce *ConfigError
	if _, _, err := pullInflowOnce(t, c, inflowSpec, t0, t1); !errors.As(err, &ce) || ce.Setting != "token" {
		t.Errorf("401: got %v, want a *ConfigError on the token", err)
	}
	f, c, _ := newFake(t, "status:503 busy")
	if _, _, err := pullInflowOnce(t, c, inflowSpec, t0, t1); !errors.Is(err, ErrUnavailable) || f.hits != 4 {
		t.Errorf("503: got %v after %d requests, want ErrUnavailable after 4", err, f.hits)
	}
}

func TestWriteLevelsInflow(t *testing.T) {
	s, c := newSink(t, 5000)
	ts := []int64{1, 2, 3, 4}
	levels := []float64{0.5, 1, math.NaN(), math.NaN()}
	inflows := []float64{0.25, math.NaN(), 2, math.Inf(1)}
	if err := c.WriteLevelsInflow(context.Background(), "tank_level", "level", "inflow", "tank", "T1", ts, levels, inflows); err != nil {
		t.Fatal(err)
	}
	want := "tank_level,tank=T1 inflow=0.25,level=0.5 1\ntank_level,tank=T1 level=1 2\ntank_level,tank=T1 inflow=2 3\n"
	if len(s.bodies) != 1 || s.bodies[0] != want {
		t.Errorf("got %q, want %q", s.bodies, want)
	}
	for _, tc := range []struct {
		name            string
		level, inflow   string
		ts              []int64
		levels, inflows []float64
		err             string
	}{
		{"lengths", "level", "inflow", []int64{1}, []float64{1}, nil, "1 times, 1 levels, 0 inflows"},
		{"same field", "level", "level", []int64{1}, []float64{1}, []float64{1}, `both "level"`},
		{"bad field", "level", "in\nflow", []int64{1}, []float64{1}, []float64{1}, "inflow field"},
	} {
		err := c.WriteLevelsInflow(context.Background(), "m", tc.level, tc.inflow, "tank", "T", tc.ts, tc.levels, tc.inflows)
		if err == nil || !strings.Contains(err.Error(), tc.err) || !strings.Contains(err.Error(), `tank "T"`) {
			t.Errorf("%s: got %v, want an error naming the tank and %q", tc.name, err, tc.err)
		}
	}
}

// BenchmarkCSVPairRows is the pivoted reader alone over an in-memory body
// in the 1.8 shape (two value columns, a third of the inflow cells empty).
func BenchmarkCSVPairRows(b *testing.B) {
	body := []byte(pivotCSV(benchTanks, benchRows))
	b.SetBytes(int64(len(body)))
	b.ReportAllocs()
	rd := bytes.NewReader(body)
	var sum float64
	for b.Loop() {
		rd.Reset(body)
		rows := newCSVPairRows(rd, "tank", "level", "inflow")
		n := 0
		for {
			_, _, v, a, ok, err := rows.nextPair()
			if err != nil {
				b.Fatal(err)
			}
			if !ok {
				break
			}
			sum += v
			if !math.IsNaN(a) {
				sum += a
			}
			n++
		}
		if n != benchTanks*benchRows {
			b.Fatalf("n=%d", n)
		}
	}
	b.ReportMetric(b.Elapsed().Seconds()*1e9/float64(b.N*benchTanks*benchRows), "ns/point")
}
