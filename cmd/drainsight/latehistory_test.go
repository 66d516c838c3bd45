package main

import (
	"fmt"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"testing"
)

// TestLateHistoryEvaluatedDayByDay: a pass over files that are still empty
// (the data path not delivering yet) records no evaluation time, so that
// when the whole history arrives the next pass evaluates it midnight by
// midnight, as a scan of the full history from the start does: the same
// findings with the same dates (the day-by-day evaluation is the
// project's own rule; the demo plant's faults are the reference).
func TestLateHistoryEvaluatedDayByDay(t *testing.T) {
	dir := demoPlant(t, "30")
	cfg := filepath.Join(dir, "demo.yaml")
	// the reference: one scan of the full history in a fresh state
	refOut := t.TempDir()
	if _, stderr, err := runArgs(t, "scan", "--new-state", "--config", cfg, "--state", filepath.Join(t.TempDir(), "ref.db"), "--out", refOut, "--final"); err != nil && exitCode(err) != 1 {
		t.Fatalf("reference scan: %v\n%s", err, stderr)
	}
	// the data path delivers nothing at first: every file holds only its
	// header (CSV) or nothing (line protocol)
	data := filepath.Join(dir, "data")
	entries, err := os.ReadDir(data)
	if err != nil {
		t.Fatal(err)
	}
	saved := map[string][]byte{}
	for _, e := range entries {
		p := filepath.Join(data, e.Name())
		b, err := os.ReadFile(p)
		if err != nil {
			t.Fatal(err)
		}
		saved[p] = b
		head := ""
		if strings.HasSuffix(p, ".csv") {
			head = string(b[:strings.IndexByte(string(b), '\n')+1])
		}
		if err := os.WriteFile(p, []byte(head), 0o600); err != nil {
			t.Fatal(err)
		}
	}
	state := filepath.Join(t.TempDir(), "late.db")
	if _, stderr, err := runArgs(t, "scan", "--new-state", "--config", cfg, "--state", state, "--out", t.TempDir()); err != nil && exitCode(err) != 1 {
		t.Fatalf("scan of empty files: %v\n%s", err, stderr)
	}
	for p, b := range saved {
		if err := os.WriteFile(p, b, 0o600); err != nil {
			t.Fatal(err)
		}
	}
	lateOut := t.TempDir()
	if _, stderr, err := runArgs(t, "scan", "--new-state", "--config", cfg, "--state", state, "--out", lateOut, "--final"); err != nil && exitCode(err) != 1 {
		t.Fatalf("scan after the history arrived: %v\n%s", err, stderr)
	}
	transitions := func(dir string) []string {
		var out []string
		for _, f := range readJSONL(t, filepath.Join(dir, "findings.jsonl")) {
			if f["kind"] == "feed" {
				continue // the empty pass's own feed notices
			}
			out = append(out, fmt.Sprintf("%s|%s|%v|%s|%s", f["tank"], f["kind"], f["subtype"], f["status"], f["status_at"]))
		}
		sort.Strings(out)
		return out
	}
	ref, late := transitions(refOut), transitions(lateOut)
	if len(ref) < 5 {
		t.Fatalf("the reference scan gave only %d findings lines", len(ref))
	}
	if strings.Join(ref, "\n") != strings.Join(late, "\n") {
		t.Errorf("late history: %d findings lines, the full scan %d\nonly in the full scan: %v\nonly late: %v",
			len(late), len(ref), minus(ref, late), minus(late, ref))
	}
}
