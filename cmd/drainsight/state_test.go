package main

import (
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

// TestStateCheckBackupAndDamage: `state check` calls a sound file sound,
// `state backup` writes a copy that checks sound too, and a scan refuses a
// damaged state file with exit status 1 and a message saying what to do,
// never a Go fault (which would exit 2, the bad-usage code).
func TestStateCheckBackupAndDamage(t *testing.T) {
	dir := demoPlant(t, "20")
	state := filepath.Join(dir, "state.db")
	out, _, err := runArgs(t, "state", "check", "--state", state)
	if err != nil || !strings.Contains(out, "sound") {
		t.Fatalf("check of the demo's state: %v\n%s", err, out)
	}
	bak := filepath.Join(t.TempDir(), "copy.db")
	if out, _, err := runArgs(t, "state", "backup", "--state", state, "--out", bak); err != nil {
		t.Fatalf("backup: %v\n%s", err, out)
	}
	if out, _, err := runArgs(t, "state", "check", "--state", bak); err != nil || !strings.Contains(out, "sound") {
		t.Errorf("check of the backup: %v\n%s", err, out)
	}
	st, _ := os.Stat(state)
	if err := os.Truncate(state, st.Size()/3); err != nil {
		t.Fatal(err)
	}
	_, _, err = runArgs(t, "scan", "--new-state", "--config", filepath.Join(dir, "demo.yaml"), "--out", t.TempDir())
	if err == nil || exitCode(err) != 1 || !strings.Contains(err.Error(), "restore a backup") {
		t.Errorf("scan over a truncated state file: %v (exit %d), want exit 1 with advice", err, exitCode(err))
	}
	if _, _, err := runArgs(t, "state", "check", "--state", state); err == nil || exitCode(err) != 1 {
		t.Errorf("state check of the truncated file: %v, want exit 1", err)
	}
	// the backup puts it right
	b, err := os.ReadFile(bak)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(state, b, 0o600); err != nil {
		t.Fatal(err)
	}
	if _, stderr, err := runArgs(t, "scan", "--new-state", "--config", filepath.Join(dir, "demo.yaml"), "--out", t.TempDir()); err != nil {
		t.Errorf("scan after restoring the backup: %v\n%s", err, stderr)
	}
}

// serve's daily copy: one per UTC day, the newest seven kept, each a sound
// state file.
func TestDailyBackup(t *testing.T) {
	dir := demoPlant(t, "20")
	state := filepath.Join(dir, "state.db")
	day := time.Date(2031, 5, 1, 9, 0, 0, 0, time.UTC)
	var names []string
	for i := range 10 {
		for range 2 { // a second scan the same day writes nothing
			name, err := dailyBackup(state, day.AddDate(0, 0, i))
			if err != nil {
				t.Fatal(err)
			}
			if name != "" {
				names = append(names, name)
			}
		}
	}
	if len(names) != 10 {
		t.Errorf("%d copies written over 10 days of two scans, want 10", len(names))
	}
	kept, _ := filepath.Glob(filepath.Join(dir, "backups", "state-*.db"))
	if len(kept) != keepBackups || !strings.HasSuffix(kept[0], "2031-05-04.db") {
		t.Errorf("kept %v, want the 7 newest (from 2031-05-04)", kept)
	}
	if out, _, err := runArgs(t, "state", "check", "--state", kept[len(kept)-1]); err != nil || !strings.Contains(out, "sound") {
		t.Errorf("check of the newest copy: %v %s", err, out)
	}
}

// A missing state file is created only for a first run: scan, backfill and
// serve refuse it with exit 1 and advice unless --new-state or
// outputs.new_state says so, and a state file that disappears after the
// first scan (a volume that did not mount) is refused the same way, never
// taken for a plant without history.
func TestMissingStateFile(t *testing.T) {
	dir := demoPlant(t, "20")
	cfg := filepath.Join(dir, "demo.yaml")
	state := filepath.Join(t.TempDir(), "fresh.db")
	for _, args := range [][]string{
		{"scan", "--config", cfg, "--state", state},
		{"backfill", "--config", cfg, "--state", state, "--since", "2026-01-01"},
		{"serve", "--config", strings.Replace(cfg, "demo.yaml", "serve.yaml", 1)},
	} {
		if args[0] == "serve" {
			y, _ := os.ReadFile(cfg)
			s := strings.Replace(string(y), "state_file: state.db", "state_file: missing.db\n  http: {address: \"off\"}", 1)
			if err := os.WriteFile(args[2], []byte(s), 0o644); err != nil {
				t.Fatal(err)
			}
		}
		_, _, err := runArgs(t, args...)
		if exitCode(err) != 1 || !strings.Contains(fmt.Sprint(err), "does not exist: for a first run pass --new-state") {
			t.Errorf("%s without a state file: %v (exit %d)", args[0], err, exitCode(err))
		}
		if _, err := os.Stat(state); err == nil {
			t.Fatalf("%s created the state file", args[0])
		}
	}
	if _, err := os.Stat(filepath.Join(dir, "missing.db")); err == nil {
		t.Error("serve created its state file")
	}
	if _, _, err := runArgs(t, "scan", "--new-state", "--config", cfg, "--state", state); err != nil {
		t.Fatalf("first scan with --new-state: %v", err)
	}
	if _, _, err := runArgs(t, "scan", "--config", cfg, "--state", state); err != nil {
		t.Errorf("second scan (the file exists): %v", err)
	}
	os.Remove(state)
	if _, _, err := runArgs(t, "scan", "--config", cfg, "--state", state); exitCode(err) != 1 {
		t.Errorf("scan after the state file vanished: %v, want exit 1", err)
	}
	// outputs.new_state: true in the config says the same as the flag.
	y, _ := os.ReadFile(cfg)
	first := filepath.Join(dir, "first.yaml")
	if err := os.WriteFile(first, []byte(strings.Replace(string(y), "state_file: state.db", "state_file: first.db\n  new_state: true", 1)), 0o644); err != nil {
		t.Fatal(err)
	}
	if _, _, err := runArgs(t, "scan", "--config", first); err != nil {
		t.Errorf("scan with outputs.new_state: %v", err)
	}
}
