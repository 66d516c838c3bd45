package main

import (
	"encoding/csv"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// export lists everything stored, where events.jsonl and findings.jsonl
// list only what each scan added: after the demo's scan and a second scan
// that adds nothing (its events.jsonl is empty), export still gives every
// fit of the demo's events.jsonl and every transition of its
// findings.jsonl, as JSON lines and as CSV with the same field names; a
// tank and a period narrow it.
func TestExport(t *testing.T) {
	dir := demoPlant(t, "20")
	cfg := filepath.Join(dir, "demo.yaml")
	fits := readJSONL(t, filepath.Join(dir, "events.jsonl"))
	var transitions int
	for _, f := range readJSONL(t, filepath.Join(dir, "findings.jsonl")) {
		if f["status"] == "new" || f["status"] == "cleared" {
			transitions++
		}
	}
	out := t.TempDir()
	if _, _, err := runArgs(t, "scan", "--config", cfg, "--out", out); err != nil {
		t.Fatal(err)
	}
	if again := readJSONL(t, filepath.Join(out, "events.jsonl")); len(again) != 0 {
		t.Fatalf("the second scan listed %d fits, want none", len(again))
	}
	jl := filepath.Join(t.TempDir(), "fits.jsonl")
	if _, _, err := runArgs(t, "export", "--config", cfg, "--out", jl); err != nil {
		t.Fatal(err)
	}
	got := readJSONL(t, jl)
	if len(got) != len(fits) || len(fits) < 50 {
		t.Fatalf("export: %d fits, events.jsonl of the first scan %d", len(got), len(fits))
	}
	for i := range got {
		if got[i]["tank"] != fits[i]["tank"] || got[i]["start"] != fits[i]["start"] || got[i]["k_m25_s"] != fits[i]["k_m25_s"] {
			t.Fatalf("fit %d: export %v, events.jsonl %v", i, got[i], fits[i])
		}
	}
	fj := filepath.Join(t.TempDir(), "findings.jsonl")
	if _, _, err := runArgs(t, "export", "--config", cfg, "--what", "findings", "--out", fj); err != nil {
		t.Fatal(err)
	}
	if n := len(readJSONL(t, fj)); n != transitions || n == 0 {
		t.Errorf("export --what findings: %d transitions, findings.jsonl of the first scan %d", n, transitions)
	}
	csvOut, _, err := runArgs(t, "export", "--config", cfg, "--tank", "KV-SMP-4", "--format", "csv", "--since", "2026-01-05", "--until", "2026-01-06")
	if err != nil {
		t.Fatal(err)
	}
	rows, err := csv.NewReader(strings.NewReader(csvOut)).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	want := 0
	for _, f := range fits {
		if f["tank"] == "KV-SMP-4" && f["end"].(string) >= "2026-01-05" && f["end"].(string) < "2026-01-06" {
			want++
		}
	}
	if len(rows) != want+1 || rows[0][0] != "tank" || rows[0][6] != "k_m25_s" || want == 0 {
		t.Errorf("csv of one tank and day: %d rows (want a header and %d), header %v", len(rows), want, rows[0])
	}
	for _, r := range rows[1:] {
		if r[0] != "KV-SMP-4" {
			t.Errorf("csv row of another tank: %v", r)
		}
	}
	if _, _, err := runArgs(t, "export", "--config", cfg, "--tank", "NOPE"); exitCode(err) != 2 {
		t.Errorf("unknown tank: %v, want exit 2", err)
	}
	os.Remove(jl)
}
