package ingest

import (
	"bytes"
	"context"
	"math"
	"os"
	"path/filepath"
	"testing"
)

// readBytes runs the reader over data through a temporary file.
func readBytes(t testing.TB, dir, name string, data []byte, opt ReadOptions) ([]sample, Report, error) {
	p := filepath.Join(dir, name)
	if err := os.WriteFile(p, data, 0o644); err != nil {
		t.Fatal(err)
	}
	var got []sample
	rep, err := ReadFile(context.Background(), p, FormatAuto, opt, collect(&got))
	return got, rep, err
}

// checkRead asserts what must hold for any input: no panic (implicit), each
// tank's times strictly increasing, values finite, and every line accounted for.
func checkRead(t *testing.T, got []sample, rep Report) {
	last := map[string]int64{}
	for _, s := range got {
		if p, ok := last[s.tank]; ok && s.t <= p {
			t.Fatalf("tank %q: time %d after %d", s.tank, s.t, p)
		}
		last[s.tank] = s.t
		if math.IsNaN(s.v) || math.IsInf(s.v, 0) {
			t.Fatalf("non-finite value %v accepted", s.v)
		}
	}
	if int64(len(got)) != rep.Samples {
		t.Fatalf("%d samples delivered, report says %d", len(got), rep.Samples)
	}
	if got, want := rep.Lines, rep.Ignored+rep.Foreign+rep.Samples+rep.Problems(); got != want {
		t.Fatalf("Lines = %d, want %d (%+v)", got, want, rep)
	}
}

func FuzzReadCSV(f *testing.F) {
	seed, _ := os.ReadFile("testdata/problems.csv")
	f.Add(seed)
	f.Add([]byte("time,tank,value\n1,a,1\n2,a,2"))
	f.Add([]byte("value,x,tank,time\r\n1,,\"a\"\"b\",2024-01-01T00:00:00Z\r\n"))
	f.Add([]byte("\xef\xbb\xbftime,tank,value\n1e3,a,1\n"))
	dir := f.TempDir()
	f.Fuzz(func(t *testing.T, data []byte) {
		got, rep, err := readBytes(t, dir, "f.csv", data, ReadOptions{MaxLineBytes: 512})
		if err != nil {
			return // bad header: the whole file is refused
		}
		checkRead(t, got, rep)
	})
}

func FuzzReadLineProtocol(f *testing.F) {
	seed, _ := os.ReadFile("testdata/problems.lp")
	f.Add(seed)
	f.Add([]byte("m,tank=a level=1 1\nm,tank=a level=2i 2\n"))
	f.Add([]byte("m\\ x,tank=a\\,b level=1,s=\"x\\\"y\" -5\n#c\n"))
	dir := f.TempDir()
	f.Fuzz(func(t *testing.T, data []byte) {
		got, rep, err := readBytes(t, dir, "f.lp", data, ReadOptions{MaxLineBytes: 512})
		if err != nil {
			t.Fatalf("line protocol never fails on content: %v", err)
		}
		checkRead(t, got, rep)
	})
}

// FuzzWriteReadRoundTrip builds a strictly increasing series from fuzz input, writes it
// in both formats and reads it back.
func FuzzWriteReadRoundTrip(f *testing.F) {
	f.Add("T1", int64(1709251200000000000), int64(60e9), 1.25, -0.5, uint8(5))
	f.Add("tank a,b=\"c\"\\", int64(-1), int64(1), 1e-300, 3e300, uint8(3))
	f.Add("T", int64(0), int64(1), 0.0, math.Copysign(0, -1), uint8(2))
	dir := f.TempDir()
	f.Fuzz(func(t *testing.T, tank string, t0, step int64, v0, dv float64, n uint8) {
		if step <= 0 || int64(n) > 0 && t0 > math.MaxInt64-step*int64(n) || step > math.MaxInt64/256 {
			return
		}
		times := make([]int64, n)
		vals := make([]float64, n)
		for i := range times {
			times[i] = t0 + int64(i)*step
			vals[i] = v0 + float64(i)*dv
		}
		var csvBuf, lpBuf bytes.Buffer
		errCSV := WriteCSV(&csvBuf, tank, times, vals)
		errLP := WriteLineProtocol(&lpBuf, "tank_level", "level", "tank", tank, times, vals)
		finite := true
		for _, v := range vals {
			finite = finite && !math.IsNaN(v) && !math.IsInf(v, 0)
		}
		for _, c := range []struct {
			name string
			data []byte
			err  error
		}{{"rt.csv", csvBuf.Bytes(), errCSV}, {"rt.lp", lpBuf.Bytes(), errLP}} {
			if c.err != nil {
				continue // names the format cannot carry, or NaN in line protocol
			}
			got, rep, err := readBytes(t, dir, c.name, c.data, ReadOptions{Precision: PrecisionAuto, Measurement: "tank_level"})
			if err != nil {
				t.Fatalf("%s: %v\n%s", c.name, err, c.data)
			}
			if !finite {
				continue // the reader counts NaN/Inf; the rest is checked by the fuzzers above
			}
			if rep.Problems() != 0 || len(got) != len(times) {
				t.Fatalf("%s: %d samples, report %v\n%s", c.name, len(got), rep, c.data)
			}
			for i, s := range got {
				if s.tank != tank || s.t != times[i] || math.Float64bits(s.v) != math.Float64bits(vals[i]) {
					t.Fatalf("%s: sample %d = %+v, want %q %d %v", c.name, i, s, tank, times[i], vals[i])
				}
			}
		}
	})
}
