package ingest

import (
	"bytes"
	"compress/gzip"
	"context"
	"drainsight/model"
	"flag"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"testing/iotest"
	"time"
)

var update = flag.Bool("update", false, "rewrite the golden files under testdata/")

type sample struct {
	tank string
	t    int64
	v    float64
}

func collect(dst *[]sample) func(string, int64, float64) {
	return func(tank string, t int64, v float64) { *dst = append(*dst, sample{tank, t, v}) }
}

// golden compares got with testdata/name, or rewrites it under -update.
func golden(t *testing.T, name, got string) {
	t.Helper()
	path := filepath.Join("testdata", name)
	if *update {
		if err := os.WriteFile(path, []byte(got), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	want, err := os.ReadFile(path)
	if err != nil {
		t.Fatalf("%v (run go test -update to create it)", err)
	}
	if got != string(want) {
		t.Errorf("%s differs from the golden file:\n--- got\n%s--- want\n%s", name, got, want)
	}
}

func balance(t *testing.T, r Report) {
	t.Helper()
	if got, want := r.Lines, r.Ignored+r.Foreign+r.Samples+r.Problems(); got != want {
		t.Errorf("Lines = %d, want Ignored+Foreign+Samples+Problems = %d (%+v)", got, want, r)
	}
}

func ns(s string) int64 {
	tm, err := time.Parse(time.RFC3339Nano, s)
	if err != nil {
		panic(err)
	}
	return tm.UnixNano()
}

func TestReadCSVProblems(t *testing.T) {
	var got []sample
	opt := ReadOptions{Tanks: map[string]bool{"T1": true, "T,2": true}}
	rep, err := ReadFile(context.Background(), "testdata/problems.csv", FormatAuto, opt, collect(&got))
	if err != nil {
		t.Fatal(err)
	}
	want := []sample{
		{"T1", ns("2024-03-01T00:00:00Z"), 1.25},
		{"T1", ns("2024-03-01T00:01:00Z"), 1.24},
		{"T1", ns("2024-03-01T00:02:00Z"), 1.23}, // Unix seconds
		{"T1", ns("2024-03-01T00:05:00Z"), 1.2},  // Unix nanoseconds
		{"T,2", ns("2024-03-01T00:06:00Z"), 0.5}, // quoted tank name
		{"T1", ns("2024-03-01T00:10:00Z"), 1.05}, // spaces around fields
		{"T1", ns("2024-03-01T00:11:00Z"), 1.0},  // last line without newline, parses
	}
	if fmt.Sprint(got) != fmt.Sprint(want) {
		t.Errorf("samples\n got %v\nwant %v", got, want)
	}
	wantCounts := map[ProblemKind]int64{
		DuplicateTime: 1, OutOfOrder: 2, NaN: 1, EmptyValue: 1, UnknownTank: 1, Malformed: 6,
	}
	for _, k := range Kinds {
		if rep.Counts[k] != wantCounts[k] {
			t.Errorf("Counts[%s] = %d, want %d", k, rep.Counts[k], wantCounts[k])
		}
	}
	balance(t, rep)
	golden(t, "problems_csv.golden", rep.String())
}

func TestReadLineProtocolProblems(t *testing.T) {
	var got []sample
	opt := ReadOptions{Measurement: "tank_level", Tanks: map[string]bool{"T1": true, "T 2": true, "T,3=x": true}}
	rep, err := ReadFile(context.Background(), "testdata/problems.lp", FormatAuto, opt, collect(&got))
	if err != nil {
		t.Fatal(err)
	}
	want := []sample{
		{"T1", 1709251200000000000, 1.25},
		{"T1", 1709251260000000000, 1.24},
		{"T1", 1709251320000000000, 12},
		{"T1", 1709251330000000000, 13},
		{"T 2", 1709251330000000000, 0.5},
		{"T,3=x", 1709251330000000000, 0.5},
		{"T1", 1709251400000000000, 0.95},
	}
	if fmt.Sprint(got) != fmt.Sprint(want) {
		t.Errorf("samples\n got %v\nwant %v", got, want)
	}
	wantCounts := map[ProblemKind]int64{
		DuplicateTime: 1, OutOfOrder: 1, NaN: 1, EmptyValue: 1, UnknownTank: 1, Malformed: 12, Truncated: 1,
	}
	for _, k := range Kinds {
		if rep.Counts[k] != wantCounts[k] {
			t.Errorf("Counts[%s] = %d, want %d", k, rep.Counts[k], wantCounts[k])
		}
	}
	if rep.Foreign != 3 {
		t.Errorf("Foreign = %d, want 3 (pump_speed, valve-only, escaped measurement name)", rep.Foreign)
	}
	balance(t, rep)
	golden(t, "problems_lp.golden", rep.String())
}

func TestParseTime(t *testing.T) {
	const t0 = 1709251200 // 2024-03-01T00:00:00Z
	tests := []struct {
		in   string
		prec Precision
		want int64
		err  bool
	}{
		{"2024-03-01T00:00:00Z", PrecisionAuto, t0 * 1e9, false},
		{"2024-03-01T01:00:00.5+01:00", PrecisionAuto, t0*1e9 + 5e8, false},
		{"2024-03-01T00:00:00.000000001Z", PrecisionAuto, t0*1e9 + 1, false},
		{"1709251200", PrecisionAuto, t0 * 1e9, false},
		{"1709251200.25", PrecisionAuto, t0*1e9 + 25e7, false},
		{"1709251200000", PrecisionAuto, t0 * 1e9, false},
		{"1709251200000.5", PrecisionAuto, t0*1e9 + 5e5, false},
		{"1709251200000000", PrecisionAuto, t0 * 1e9, false},
		{"1709251200000000000", PrecisionAuto, t0 * 1e9, false},
		{"1709251200000000000.9", PrecisionAuto, t0 * 1e9, false}, // below 1 ns: truncated
		{"-86400", PrecisionAuto, -86400e9, false},
		{"0", PrecisionAuto, 0, false},
		// Below 1e11 is seconds (and beyond 2262 out of range); 1e11 is
		// milliseconds (1973-03-03).
		{"9223372036", PrecisionAuto, 9223372036e9, false},
		{"99999999999", PrecisionAuto, 0, true},
		{"100000000000", PrecisionAuto, 100000000000e6, false},
		{"1709251200", PrecisionMs, t0 * 1e6, false},
		{"1709251200", PrecisionNs, t0, false},
		{"1709251200.123456789", PrecisionS, t0*1e9 + 123456789, false},
		{"9223372036854775807", PrecisionNs, math.MaxInt64, false},
		{"9223372036854775808", PrecisionNs, 0, true},
		{"9300000000", PrecisionS, 0, true},
		{"99999999999999999999999", PrecisionAuto, 0, true},
		{"2262-04-12T00:00:00Z", PrecisionAuto, 0, true},
		{"2024-02-30T00:00:00Z", PrecisionAuto, 0, true},
		{"2024-03-01", PrecisionAuto, 0, true},
		{"", PrecisionAuto, 0, true},
		{".", PrecisionAuto, 0, true},
		{"12a", PrecisionAuto, 0, true},
		{"1.2.3", PrecisionAuto, 0, true},
	}
	for _, tc := range tests {
		got, err := parseTime([]byte(tc.in), tc.prec)
		if (err != nil) != tc.err || got != tc.want {
			t.Errorf("parseTime(%q, %v) = %d, %v; want %d, error %v", tc.in, tc.prec, got, err, tc.want, tc.err)
		}
	}
}

func TestReadLineProtocolPrecisionAndInflow(t *testing.T) {
	dir := t.TempDir()
	p := filepath.Join(dir, "a.lp")
	data := "m,tank=A level=2,inflow=3 1000\n" +
		"m,tank=A inflow=4 1500\n" +
		"m,tank=A level=1.5 2000\n" +
		"m,tank=A level=1.4,inflow=x 3000\n" +
		"m,tank=A inflow=5 1200\n" // out of order for the meter
	if err := os.WriteFile(p, []byte(data), 0o644); err != nil {
		t.Fatal(err)
	}
	var lv, fl []sample
	opt := ReadOptions{Precision: PrecisionS, InflowField: "inflow", OnInflow: collect(&fl)}
	rep, err := ReadFile(context.Background(), p, FormatLineProtocol, opt, collect(&lv))
	if err != nil {
		t.Fatal(err)
	}
	wantLv := []sample{{"A", 1000e9, 2}, {"A", 2000e9, 1.5}, {"A", 3000e9, 1.4}}
	wantFl := []sample{{"A", 1000e9, 3}, {"A", 1500e9, 4}}
	if fmt.Sprint(lv) != fmt.Sprint(wantLv) || fmt.Sprint(fl) != fmt.Sprint(wantFl) {
		t.Errorf("levels %v, inflow %v; want %v, %v", lv, fl, wantLv, wantFl)
	}
	if rep.Counts[Malformed] != 1 || rep.Counts[OutOfOrder] != 1 || rep.InflowSamples != 2 {
		t.Errorf("report %+v: want 1 malformed inflow, 1 out-of-order inflow, 2 inflow samples", rep)
	}
}

func TestReadGzipAndTruncated(t *testing.T) {
	dir := t.TempDir()
	var buf bytes.Buffer
	zw := gzip.NewWriter(&buf)
	times := make([]int64, 2000)
	vals := make([]float64, len(times))
	for i := range times {
		times[i] = int64(i) * 1e9
		vals[i] = float64(i) / 7
	}
	if err := WriteCSV(zw, "T1", times, vals); err != nil {
		t.Fatal(err)
	}
	zw.Close()
	whole := filepath.Join(dir, "whole.csv.gz")
	cut := filepath.Join(dir, "cut.csv.gz")
	os.WriteFile(whole, buf.Bytes(), 0o644)
	os.WriteFile(cut, buf.Bytes()[:buf.Len()/2], 0o644)

	var got []sample
	rep, err := ReadFile(context.Background(), whole, FormatAuto, ReadOptions{}, collect(&got))
	if err != nil || len(got) != len(times) || rep.Problems() != 0 {
		t.Fatalf("whole: %d samples, %v, %v; want %d and no problem", len(got), rep, err, len(times))
	}
	got = got[:0]
	rep, err = ReadFile(context.Background(), cut, FormatAuto, ReadOptions{}, collect(&got))
	if err != nil {
		t.Fatal(err)
	}
	if rep.Counts[Truncated] != 1 || len(got) == 0 || len(got) >= len(times) {
		t.Errorf("cut: %d samples, report %v; want some samples and one truncated", len(got), rep)
	}
	balance(t, rep)
	for i, s := range got {
		if s.t != times[i] || s.v != vals[i] {
			t.Fatalf("cut: sample %d = %v, want %v %v", i, s, times[i], vals[i])
		}
	}
}

func TestReadLongLine(t *testing.T) {
	dir := t.TempDir()
	p := filepath.Join(dir, "long.csv")
	long := "1,T1," + strings.Repeat("9", 200000)
	os.WriteFile(p, []byte("time,tank,value\n1,T1,1\n"+long+"\n3,T1,3\n"), 0o644)
	var got []sample
	rep, err := ReadFile(context.Background(), p, FormatCSV, ReadOptions{MaxLineBytes: 1000}, collect(&got))
	if err != nil {
		t.Fatal(err)
	}
	if len(got) != 2 || rep.Counts[Malformed] != 1 || rep.Lines != 4 {
		t.Errorf("got %v, report %+v; want 2 samples, 1 malformed, 4 lines", got, rep)
	}
}

func TestReadErrors(t *testing.T) {
	dir := t.TempDir()
	noHeader := filepath.Join(dir, "x.csv")
	os.WriteFile(noHeader, []byte("1,T1,1\n"), 0o644)
	notGz := filepath.Join(dir, "x.csv.gz")
	os.WriteFile(notGz, []byte("time,tank,value\n"), 0o644)
	for _, tc := range []struct{ path, want string }{
		{noHeader, "x.csv:1: header"},
		{notGz, "not a gzip stream"},
		{filepath.Join(dir, "missing.csv"), "no such file"},
		{filepath.Join(dir, "x.dat"), "cannot tell the format"},
	} {
		_, err := ReadFile(context.Background(), tc.path, FormatAuto, ReadOptions{}, func(string, int64, float64) {})
		if err == nil || !strings.Contains(err.Error(), tc.want) || !strings.HasPrefix(err.Error(), "ingest: ") {
			t.Errorf("ReadFile(%s) error = %v, want one containing %q", tc.path, err, tc.want)
		}
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if _, err := ReadFile(ctx, noHeader, FormatAuto, ReadOptions{}, func(string, int64, float64) {}); err == nil {
		t.Error("ReadFile with a cancelled context: no error")
	}
}

func TestReadSeries(t *testing.T) {
	dir := t.TempDir()
	write := func(name, body string) {
		if err := os.WriteFile(filepath.Join(dir, name), []byte(body), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	// Two days, T1 in mm (zero offset 10 mm, outlet 0.1 m), T2 in kPa.
	write("2024-03-01.lp", "lvl,tank=T1 level=1010 100\nlvl,tank=T2 p=1 100\nlvl,tank=T1 level=910 200\nlvl,tank=T2 level=9.789063734554999 200\n")
	write("2024-03-02.lp", "lvl,tank=T1 level=810 300\nlvl,tank=T1 level=700 150\nlvl,tank=T3 level=1 300\nlvl,tank=T1 level=790,q=2 400\n")
	conv := map[string]Conversion{
		"T1": {Sensor: Sensor{Kind: Depth, UnitToSI: 1e-3, ZeroOffset: 10}, OutletElevM: 0.1, InflowToSI: 1e-3},
		"T2": {Sensor: Sensor{Kind: Pressure, UnitToSI: 1000}},
	}
	opt := ReadOptions{InflowField: "q"}
	series, rep, err := ReadSeries(context.Background(), []string{filepath.Join(dir, "*.lp"), filepath.Join(dir, "2024-03-01.lp")}, FormatAuto, opt, conv)
	if err != nil {
		t.Fatal(err)
	}
	s1 := series["T1"]
	if s1 == nil || fmt.Sprint(s1.TimeNs) != "[100 200 300 400]" {
		t.Fatalf("T1 = %+v, want times [100 200 300 400]", s1)
	}
	for i, want := range []float64{0.9, 0.8, 0.7, 0.68} {
		if math.Abs(s1.HeadM[i]-want) > 1e-12 {
			t.Errorf("T1 head[%d] = %.15g, want %v", i, s1.HeadM[i], want)
		}
	}
	if len(s1.InflowM3s) != 4 || !math.IsNaN(s1.InflowM3s[0]) || s1.InflowM3s[3] != 2e-3 {
		t.Errorf("T1 inflow = %v, want [NaN NaN NaN 0.002]", s1.InflowM3s)
	}
	// 9.789063734554999 kPa = 998.2067 kg/m^3 · 9.80665 m/s^2 · 1 m (computed).
	if s2 := series["T2"]; s2 == nil || s2.Len() != 1 || math.Abs(s2.HeadM[0]-1) > 1e-12 || s2.InflowM3s != nil {
		t.Errorf("T2 = %+v, want one sample of 1 m head and no inflow", s2)
	}
	if rep.Files != 2 || rep.Counts[OutOfOrder] != 1 || rep.Counts[UnknownTank] != 1 || rep.Foreign != 1 {
		t.Errorf("report: %v", rep)
	}
	if _, _, err := ReadSeries(context.Background(), []string{filepath.Join(dir, "*.csv")}, FormatAuto, opt, conv); err == nil {
		t.Error("pattern without matches: no error")
	}
	if _, _, err := ReadSeries(context.Background(), nil, FormatAuto, opt, map[string]Conversion{"X": {}}); err == nil {
		t.Error("invalid sensor: no error")
	}
}

// TestStreamSeriesChunksMatchWhole reads a file with two tanks and a metered
// inflow whose readings change between chunks, in chunks of 1 to 5 samples,
// and expects exactly what ReadSeries returns in one piece.
func TestStreamSeriesChunksMatchWhole(t *testing.T) {
	dir := t.TempDir()
	var b strings.Builder
	for i := 1; i <= 12; i++ {
		fmt.Fprintf(&b, "lvl,tank=A level=%d %d\n", 1000-10*i, 100*i)
		if i%4 == 0 {
			fmt.Fprintf(&b, "lvl,tank=A q=%d %d\n", i, 100*i+50)
		}
		fmt.Fprintf(&b, "lvl,tank=B level=%d,q=%d %d\n", 500+i, i, 100*i)
	}
	if err := os.WriteFile(filepath.Join(dir, "x.lp"), []byte(b.String()), 0o644); err != nil {
		t.Fatal(err)
	}
	conv := map[string]Conversion{
		"A": {Sensor: Sensor{Kind: Depth, UnitToSI: 1e-3}, InflowToSI: 1e-3},
		"B": {Sensor: Sensor{Kind: Depth, UnitToSI: 1e-3}, InflowToSI: 1e-3},
	}
	opt := ReadOptions{InflowField: "q"}
	pat := []string{filepath.Join(dir, "x.lp")}
	whole, _, err := ReadSeries(context.Background(), pat, FormatAuto, opt, conv)
	if err != nil {
		t.Fatal(err)
	}
	for chunk := 1; chunk <= 5; chunk++ {
		got := map[string]*model.Series{}
		_, err := StreamSeries(context.Background(), pat, FormatAuto, opt, conv, chunk, func(c *model.Series) {
			if c.Len() > chunk {
				t.Errorf("chunk of %d samples, limit %d", c.Len(), chunk)
			}
			s := got[c.Tank]
			if s == nil {
				s = &model.Series{Tank: c.Tank}
				got[c.Tank] = s
			}
			s.TimeNs = append(s.TimeNs, c.TimeNs...)
			s.HeadM = append(s.HeadM, c.HeadM...)
			s.InflowM3s = append(s.InflowM3s, c.InflowM3s...)
		})
		if err != nil {
			t.Fatal(err)
		}
		for _, tank := range []string{"A", "B"} {
			if g, w := fmt.Sprint(*got[tank]), fmt.Sprint(*whole[tank]); g != w {
				t.Errorf("chunk %d, tank %s:\n got %s\nwant %s", chunk, tank, g, w)
			}
		}
	}
	// Sample-and-hold: A's meter reads 4 L/s from t=450, so the sample at 500 holds it.
	if a := whole["A"]; !math.IsNaN(a.InflowM3s[3]) || a.InflowM3s[4] != 4e-3 {
		t.Errorf("A inflow = %v", a.InflowM3s)
	}
}

// Readings that are no level of the tank (1e308 m in a 4 m tank, a
// negative reading metres below its bottom, a value that converts to no
// level) are counted as out_of_range with their file and line and not
// delivered; readings within the tolerance, a small negative zero offset
// included, are samples.
func TestReadOutOfRange(t *testing.T) {
	dir := t.TempDir()
	body := "time,tank,value\n" +
		"2024-03-01T00:00:00Z,T1,1.5\n" +
		"2024-03-01T00:00:10Z,T1,1e308\n" +
		"2024-03-01T00:00:20Z,T1,-0.03\n" +
		"2024-03-01T00:00:30Z,T1,-3\n" +
		"2024-03-01T00:00:40Z,T1,4.2\n" +
		"2024-03-01T00:00:50Z,T1,1.4\n"
	path := filepath.Join(dir, "a.csv")
	if err := os.WriteFile(path, []byte(body), 0o644); err != nil {
		t.Fatal(err)
	}
	// a 4 m tank, outlet 0.2 m up, 0.4 m tolerance: heads -0.6 to 4.2 m
	conv := map[string]Conversion{"T1": {Sensor: Sensor{Kind: Depth, UnitToSI: 1}, OutletElevM: 0.2, MinHeadM: -0.6, MaxHeadM: 4.2}}
	series, rep, err := ReadSeries(context.Background(), []string{path}, FormatAuto, ReadOptions{}, conv)
	if err != nil {
		t.Fatal(err)
	}
	if s := series["T1"]; s == nil || s.Len() != 4 {
		t.Fatalf("T1: %+v, want 4 samples (1.5, -0.03, 4.2 and 1.4)", s)
	}
	if rep.Counts[OutOfRange] != 2 {
		t.Errorf("out_of_range %d, want 2 (1e308 and -3)", rep.Counts[OutOfRange])
	}
	var lines []int64
	for _, p := range rep.Examples {
		if p.Kind == OutOfRange {
			lines = append(lines, p.Line)
		}
	}
	if fmt.Sprint(lines) != "[3 5]" {
		t.Errorf("out_of_range lines %v, want [3 5]", lines)
	}
	if rep.Lines != rep.Ignored+rep.Foreign+rep.Samples+rep.Problems() {
		t.Errorf("lines not all accounted for: %v", rep)
	}
}

// Names of tanks that are not configured are counted, never kept: reading
// 50 000 distinct unknown names interns none of them.
func TestUnknownTanksNotInterned(t *testing.T) {
	var b strings.Builder
	b.WriteString("time,tank,value\n")
	for i := range 50000 {
		fmt.Fprintf(&b, "2024-03-01T00:00:00Z,X%07d,1\n", i)
	}
	b.WriteString("2024-03-01T00:00:00Z,T1,1\n")
	path := filepath.Join(t.TempDir(), "u.csv")
	if err := os.WriteFile(path, []byte(b.String()), 0o644); err != nil {
		t.Fatal(err)
	}
	ord := newOrder()
	var got []sample
	rep, err := readFile(context.Background(), path, FormatAuto, ReadOptions{Tanks: map[string]bool{"T1": true}}, ord, collect(&got))
	if err != nil {
		t.Fatal(err)
	}
	if rep.Counts[UnknownTank] != 50000 || len(got) != 1 || len(ord.names) != 1 {
		t.Errorf("unknown %d, samples %d, names kept %d; want 50000, 1, 1", rep.Counts[UnknownTank], len(got), len(ord.names))
	}
}

// Line ends of every kind read the same samples, also when the reader
// hands the bytes over one at a time (a "\r" at the end of a read waits for
// the next byte): "\n", "\r\n" and a lone "\r" (old Macintosh files).
func TestReadLineEnds(t *testing.T) {
	rows := []string{"time,tank,value", "2024-03-01T00:00:00Z,T1,1.5", "2024-03-01T00:00:10Z,T1,1.4", "2024-03-01T00:00:20Z,T1,1.3"}
	for _, eol := range []string{"\n", "\r\n", "\r"} {
		for _, oneByte := range []bool{false, true} {
			body := strings.Join(rows, eol) + eol
			var r io.Reader = strings.NewReader(body)
			if oneByte {
				r = iotest.OneByteReader(r)
			}
			lr := newLineReader(r, 0)
			var got []string
			for {
				line, _, tooLong, err := lr.next()
				if err != nil {
					break
				}
				if tooLong {
					t.Fatalf("eol %q: a line too long", eol)
				}
				got = append(got, string(line))
			}
			if strings.Join(got, "|") != strings.Join(rows, "|") {
				t.Errorf("eol %q one byte %v: lines %q, want %q", eol, oneByte, got, rows)
			}
		}
	}
}

// A file none of whose lines can be read (here line protocol given as
// CSV) is an error naming the file and the first bad line, not a read that
// silently gives nothing.
func TestReadUnreadableFileIsAnError(t *testing.T) {
	path := filepath.Join(t.TempDir(), "wrong.csv")
	if err := os.WriteFile(path, []byte("time,tank,value\nlvl,tank=T1 level=1 100\nlvl,tank=T1 level=2 200\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	_, rep, err := ReadSeries(context.Background(), []string{path}, FormatCSV, ReadOptions{}, map[string]Conversion{"T1": {Sensor: Sensor{Kind: Depth, UnitToSI: 1}}})
	if err == nil || !strings.Contains(err.Error(), "wrong.csv") || !strings.Contains(err.Error(), "line 2") {
		t.Errorf("unreadable file: err %v, want one naming the file and line 2", err)
	}
	if rep.Counts[Malformed] != 2 {
		t.Errorf("malformed %d, want 2", rep.Counts[Malformed])
	}
}

// A tag or field that line protocol gives twice on one line is malformed,
// never resolved silently to one of the two values.
func TestLineProtocolDuplicates(t *testing.T) {
	p := lpParser{field: "level", inflowField: "q", tankTag: "tank", prec: PrecisionNs}
	for _, c := range []struct{ line, want string }{
		{"lvl,tank=T1,tank=T2 level=1 100", `tag "tank" given twice`},
		{"lvl,tank=T1 level=1,level=2 100", `field "level" given twice`},
		{"lvl,tank=T1 level=1,q=2,q=3 100", `field "q" given twice`},
	} {
		r := p.parse([]byte(c.line))
		if r.kind != Malformed || !strings.Contains(r.text, c.want) {
			t.Errorf("%s: %s %q, want malformed: %s", c.line, r.kind, r.text, c.want)
		}
	}
	if r := p.parse([]byte("lvl,tank=T1,site=a level=1,other=1,q=2 100")); r.kind != "" || !r.hasLevel || !r.hasInflow {
		t.Errorf("a line with each once: %+v", r)
	}
}
