package main

import (
	"bufio"
	"fmt"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	"drainsight/ingest"
	"drainsight/model"
	"drainsight/model/sim"
)

// wholeJobHistory writes the benchmark's history with the project's
// simulator: 20 vertical tanks, 30 days at 5 s (10.4 M samples), three
// drains a day, 2 mm noise, one CSV file; and a config reading it.
func wholeJobHistory(b *testing.B) (cfg, data string, samples int64) {
	b.Helper()
	dir := b.TempDir()
	data = filepath.Join(dir, "history.csv")
	f, err := os.Create(data)
	if err != nil {
		b.Fatal(err)
	}
	w := bufio.NewWriterSize(f, 1<<20)
	if _, err := w.WriteString(ingest.CSVHeader); err != nil {
		b.Fatal(err)
	}
	from := time.Date(2031, 1, 1, 0, 0, 0, 0, time.UTC)
	var y strings.Builder
	y.WriteString("tanks:\n")
	for i := range 20 {
		id := fmt.Sprintf("WJ-%02d", i)
		tk := model.Tank{ID: id, Shape: model.VerticalCylinder{DiameterM: 2.5, InternalHeightM: 3}, OutletElevM: 0.1, DatumKnown: true}
		spec := sim.TankSpec{Tank: tk, KM25s: 0.004, SampleEvery: 5 * time.Second, NoiseM: 0.002, FillToM: 2.5,
			DrainsPerDay: 3, FillRateM3s: 0.01, PartialDrainShare: 0.2}
		s, _ := sim.Simulate(spec, from, from.Add(30*24*time.Hour), rand.New(rand.NewPCG(uint64(i), 1)))
		if err := ingest.WriteCSVRows(w, id, s.TimeNs, s.HeadM); err != nil {
			b.Fatal(err)
		}
		samples += int64(s.Len())
		fmt.Fprintf(&y, "  - id: %s\n    geometry: {shape: vertical_cylinder, diameter: 2.5 m, height: 3 m}\n    outlet: {elevation: 0.1 m}\n    sensor: {kind: depth, unit: m}\n    source: {format: csv, paths: [%s]}\n", id, data)
	}
	if err := w.Flush(); err != nil {
		b.Fatal(err)
	}
	f.Close()
	fmt.Fprintf(&y, "outputs:\n  directory: %s\n  http: {address: \"off\"}\n", filepath.Join(dir, "out"))
	cfg = filepath.Join(dir, "wholejob.yaml")
	if err := os.WriteFile(cfg, []byte(y.String()), 0o644); err != nil {
		b.Fatal(err)
	}
	return cfg, data, samples
}

// BenchmarkWholeJob is the whole job on a 10 M-sample CSV history (see
// wholeJobHistory): `scan` as a separate process (read, parse, segment,
// fit, detect, write the outputs, a fresh state file each time), reported
// as M samples/s and the process's peak RSS, beside the read floor: the
// file's bytes read and split into lines, nothing parsed. Run with
// go test -bench WholeJob -run '^$' -benchtime 3x ./cmd/drainsight
func BenchmarkWholeJob(b *testing.B) {
	cfg, data, samples := wholeJobHistory(b)
	st, _ := os.Stat(data)
	b.Run("read-floor", func(b *testing.B) {
		b.SetBytes(st.Size())
		for b.Loop() {
			f, err := os.Open(data)
			if err != nil {
				b.Fatal(err)
			}
			sc := bufio.NewScanner(bufio.NewReaderSize(f, 1<<20))
			n := 0
			for sc.Scan() {
				n++
			}
			f.Close()
			if int64(n) != samples+1 {
				b.Fatalf("%d lines, want %d", n, samples+1)
			}
		}
		b.ReportMetric(float64(samples)*float64(b.N)/b.Elapsed().Seconds()/1e6, "M-samples/s")
	})
	b.Run("scan", func(b *testing.B) {
		var rss int64
		for b.Loop() {
			dir := b.TempDir()
			cmd := exec.Command(os.Args[0], "-test.run=^TestHelperDrainsight$")
			hwm := filepath.Join(dir, "hwm")
			cmd.Env = append(os.Environ(), "DRAINSIGHT_HELPER_ARGS="+strings.Join([]string{"scan", "--new-state", "--config", cfg, "--state", filepath.Join(dir, "s.db"), "--out", dir}, "\n"),
				"DRAINSIGHT_HELPER_HWM="+hwm)
			if out, err := cmd.CombinedOutput(); err != nil && exitCode(err) != 1 {
				b.Fatalf("scan: %v\n%s", err, out)
			}
			// VmHWM of the scan's own process image, kB (getrusage's maxrss
			// would carry this process's from the fork).
			if kb, err := os.ReadFile(hwm); err == nil {
				if v, err := strconv.ParseInt(string(kb), 10, 64); err == nil {
					rss = max(rss, v)
				}
			}
		}
		b.ReportMetric(float64(samples)*float64(b.N)/b.Elapsed().Seconds()/1e6, "M-samples/s")
		b.ReportMetric(float64(rss)/1024, "peak-RSS-MB")
	})
}
