package main

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// A cleaning recorded on the demo sump while its outlet stays blocked (the
// simulator blocks it by 35 % from 55 % of the history, model/sim/demo.go,
// and no cleaning changes the data): after the next scan the tank's
// restriction is open again as not restored by that cleaning, and the
// report lists the tank for action with that reason, instead of taking the
// blocked K for its new baseline.
func TestCleaningThatDidNotWorkEndToEnd(t *testing.T) {
	dir := demoPlant(t, "40")
	cfg := filepath.Join(dir, "demo.yaml")
	if out, _, err := runArgs(t, "maintenance", "add", "--config", cfg, "--tank", "KV-SMP-4", "--at", "2026-01-28", "--action", "cleaned", "--note", "jetted"); err != nil {
		t.Fatalf("maintenance add: %v\n%s", err, out)
	}
	if _, stderr, err := runArgs(t, "scan", "--config", cfg); err != nil {
		t.Fatalf("scan: %v\n%s", err, stderr)
	}
	open := false
	for _, f := range readJSONL(t, filepath.Join(dir, "findings.jsonl")) {
		if f["tank"] == "KV-SMP-4" && f["kind"] == "restriction" && f["subtype"] == "not_restored" && f["status"] != "cleared" {
			open = true
		}
	}
	if !open {
		t.Errorf("no open not_restored restriction for KV-SMP-4 after the cleaning that did not work")
	}
	if _, _, err := runArgs(t, "report", "--config", cfg); err != nil {
		t.Fatal(err)
	}
	md, _ := os.ReadFile(filepath.Join(dir, "report.md"))
	if !strings.Contains(string(md), "| KV-SMP-4 | ACTION |") || !strings.Contains(string(md), "not restored by the maintenance (cleaned) of 2026-01-28") {
		t.Errorf("the report does not keep the sump for action:\n%s", md)
	}
}
