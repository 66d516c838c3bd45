package main

import (
	"bufio"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
)

// peakRSS runs the program as its own process (TestHelperDrainsight) and
// returns its peak resident set (VmHWM from /proc, kB) and its error.
func peakRSS(t *testing.T, args ...string) (int64, error) {
	t.Helper()
	hwm := filepath.Join(t.TempDir(), "hwm")
	cmd := exec.Command(os.Args[0], "-test.run=^TestHelperDrainsight$")
	cmd.Env = append(os.Environ(), "DRAINSIGHT_HELPER_ARGS="+strings.Join(args, "\n"), "DRAINSIGHT_HELPER_HWM="+hwm)
	err := cmd.Run()
	b, rerr := os.ReadFile(hwm)
	if rerr != nil {
		t.Skipf("no peak resident set from /proc on this system: %v", rerr)
	}
	kb, perr := strconv.ParseInt(string(b), 10, 64)
	if perr != nil {
		t.Fatalf("VmHWM %q: %v", b, perr)
	}
	return kb, err
}

// Bad input keeps memory flat: a file of 1 M readings of 1 M distinct
// unknown tank names, and one of 1 M readings of 1e308 m, each beside a
// few real readings, peak at no more than twice the resident memory of the
// same number of good readings of the tank (the project's requirement,
// issue 12); both are reported, not analysed.
func TestPathologicalInputMemory(t *testing.T) {
	if testing.Short() || raceEnabled {
		t.Skip("three passes over 1 M lines each, without the race detector")
	}
	const n = 1_000_000
	dir := t.TempDir()
	write := func(name string, line func(i int) string) {
		f, err := os.Create(filepath.Join(dir, name))
		if err != nil {
			t.Fatal(err)
		}
		w := bufio.NewWriterSize(f, 1<<20)
		fmt.Fprintln(w, "time,tank,value")
		for i := range n {
			fmt.Fprintln(w, line(i))
		}
		if err := w.Flush(); err != nil {
			t.Fatal(err)
		}
		f.Close()
	}
	at := func(i int) string { return fmt.Sprintf("%d", 1767225600+5*i) } // 2026-01-01 onwards, every 5 s
	write("good.csv", func(i int) string { return at(i) + ",T1," + fmt.Sprint(1.5+0.001*float64(i%7)) })
	write("unknown.csv", func(i int) string {
		if i%100_000 == 0 {
			return at(i) + ",T1,1.5"
		}
		return fmt.Sprintf("%s,U%07d,1.5", at(i), i)
	})
	write("huge.csv", func(i int) string {
		if i%100_000 == 0 {
			return at(i) + ",T1,1.5"
		}
		return at(i) + ",T1,1e308"
	})
	rss := map[string]int64{}
	for _, name := range []string{"good", "unknown", "huge"} {
		cfg := filepath.Join(dir, name+".yaml")
		y := fmt.Sprintf(`tanks:
  - id: T1
    geometry: {shape: vertical_cylinder, diameter: 2 m, height: 3 m}
    outlet: {diameter: 50 mm, elevation: 0 m}
    sensor: {kind: depth, unit: m}
    source: {format: csv, paths: [%s.csv]}
outputs: {directory: %s-out}
`, name, name)
		if err := os.WriteFile(cfg, []byte(y), 0o644); err != nil {
			t.Fatal(err)
		}
		kb, err := peakRSS(t, "scan", "--new-state", "--config", cfg)
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		rss[name] = kb
	}
	t.Logf("peak RSS: good %d kB, unknown names %d kB, 1e308 readings %d kB", rss["good"], rss["unknown"], rss["huge"])
	for _, name := range []string{"unknown", "huge"} {
		if rss[name] > 2*rss["good"] {
			t.Errorf("%s: peak RSS %d kB, over twice the %d kB of good input", name, rss[name], rss["good"])
		}
	}
}
