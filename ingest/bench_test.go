package ingest

import (
	"bytes"
	"context"
	"os"
	"path/filepath"
	"testing"
)

// benchFile writes n samples for 4 tanks in the given format.
func benchFile(b *testing.B, name string, n int) string {
	var buf bytes.Buffer
	times := make([]int64, n)
	vals := make([]float64, n)
	for i := range times {
		times[i] = 1709251200e9 + int64(i)*10e9
		vals[i] = 2.5 - float64(i)*1e-4
	}
	for k, tank := range []string{"T1", "T2", "T3", "T4"} {
		var err error
		switch {
		case filepath.Ext(name) == ".lp":
			err = WriteLineProtocol(&buf, "tank_level", "level", "tank", tank, times, vals)
		case k == 0:
			err = WriteCSV(&buf, tank, times, vals)
		default:
			err = WriteCSVRows(&buf, tank, times, vals)
		}
		if err != nil {
			b.Fatal(err)
		}
	}
	p := filepath.Join(b.TempDir(), name)
	if err := os.WriteFile(p, buf.Bytes(), 0o644); err != nil {
		b.Fatal(err)
	}
	return p
}

func benchRead(b *testing.B, name string) {
	p := benchFile(b, name, 50000)
	var lines int64
	b.ResetTimer()
	for b.Loop() {
		rep, err := ReadFile(context.Background(), p, FormatAuto, ReadOptions{Measurement: "tank_level"}, func(string, int64, float64) {})
		if err != nil || rep.Samples != 200000 {
			b.Fatalf("%v %v", rep, err)
		}
		lines += rep.Lines
	}
	b.ReportMetric(float64(lines)/b.Elapsed().Seconds(), "lines/s")
}

func BenchmarkReadCSV(b *testing.B)          { benchRead(b, "bench.csv") }
func BenchmarkReadLineProtocol(b *testing.B) { benchRead(b, "bench.lp") }

func BenchmarkWriteLineProtocol(b *testing.B) {
	times := make([]int64, 10000)
	vals := make([]float64, len(times))
	for i := range times {
		times[i] = 1709251200e9 + int64(i)*10e9
		vals[i] = 2.5 - float64(i)*1e-4
	}
	var buf bytes.Buffer
	for b.Loop() {
		buf.Reset()
		if err := WriteLineProtocol(&buf, "tank_level", "level", "tank", "T1", times, vals); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(len(times))*float64(b.N)/b.Elapsed().Seconds(), "lines/s")
}
