package main

import (
	"context"
	"fmt"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"sort"
	"strings"
	"syscall"
	"testing"
	"time"

	"drainsight/config"
)

// TestHelperDrainsight is the program itself when the test binary is run
// again by TestKilledPassesLoseNothing (DRAINSIGHT_HELPER_ARGS holds the
// arguments, one per line); otherwise it does nothing.
func TestHelperDrainsight(t *testing.T) {
	args := os.Getenv("DRAINSIGHT_HELPER_ARGS")
	if args == "" {
		t.Skip("the program, when run by TestKilledPassesLoseNothing")
	}
	err := run(context.Background(), strings.Split(args, "\n"), os.Stdout, os.Stderr)
	if path := os.Getenv("DRAINSIGHT_HELPER_HWM"); path != "" {
		// The peak resident set of this process image (VmHWM: reset by
		// exec, where getrusage's maxrss keeps the parent's from the fork).
		if b, rerr := os.ReadFile("/proc/self/status"); rerr == nil {
			for _, l := range strings.Split(string(b), "\n") {
				if strings.HasPrefix(l, "VmHWM:") {
					os.WriteFile(path, []byte(strings.TrimSpace(strings.TrimSuffix(strings.TrimPrefix(l, "VmHWM:"), "kB"))), 0o600)
				}
			}
		}
	}
	os.Exit(exitCode(err))
}

// outputKeys reads the drains and the transitions (new and cleared, with
// their times) an output directory lists; ok is false when the pass left
// no files there.
func outputKeys(t *testing.T, dir string) (drains, transitions []string, ok bool) {
	ev, fi := filepath.Join(dir, "events.jsonl"), filepath.Join(dir, "findings.jsonl")
	if _, err := os.Stat(ev); err != nil {
		return nil, nil, false
	}
	for _, e := range readJSONL(t, ev) {
		drains = append(drains, fmt.Sprintf("%s|%s|%s", e["tank"], e["start"], e["end"]))
	}
	if _, err := os.Stat(fi); err != nil {
		return drains, nil, true
	}
	for _, f := range readJSONL(t, fi) {
		if f["status"] != "ongoing" {
			transitions = append(transitions, fmt.Sprintf("%s|%s|%v|%s|%s", f["tank"], f["kind"], f["subtype"], f["status"], f["status_at"]))
		}
	}
	return drains, transitions, true
}

func uniq(s []string) []string {
	sort.Strings(s)
	out := s[:0]
	for i, x := range s {
		if i == 0 || x != s[i-1] {
			out = append(out, x)
		}
	}
	return out
}

// TestKilledPassesLoseNothing kills scans of the demo plant with SIGKILL at
// random points and runs them again until one completes, as a scheduler
// would, also through a pass whose outputs directory cannot be written:
// the events and findings files of the passes that completed list every
// drain and every transition of an undisturbed scan (a repeat is allowed:
// the stable keys let a reader drop it), none lost.
func TestKilledPassesLoseNothing(t *testing.T) {
	dir := t.TempDir()
	days := "40"
	trials := 4
	if raceEnabled {
		days, trials = "20", 2
	}
	if _, stderr, err := runArgs(t, "demo", "--out", dir, "--days", days); err != nil {
		t.Fatalf("demo: %v\n%s", err, stderr)
	}
	cfg := filepath.Join(dir, "demo.yaml")
	refOut := t.TempDir()
	helper := func(args ...string) *exec.Cmd {
		cmd := exec.Command(os.Args[0], "-test.run=^TestHelperDrainsight$")
		cmd.Env = append(os.Environ(), "DRAINSIGHT_HELPER_ARGS="+strings.Join(args, "\n"))
		return cmd
	}
	start := time.Now()
	if err := helper("scan", "--new-state", "--config", cfg, "--state", filepath.Join(t.TempDir(), "ref.db"), "--out", refOut).Run(); err != nil {
		t.Fatalf("reference scan: %v", err)
	}
	full := time.Since(start) // the kills fall anywhere in a pass this long
	refD, refT, _ := outputKeys(t, refOut)
	refD, refT = uniq(refD), uniq(refT)
	if len(refD) < 50 || len(refT) < 3 {
		t.Fatalf("reference: %d drains, %d transitions", len(refD), len(refT))
	}
	kills := 0
	for trial := range trials {
		rng := rand.New(rand.NewPCG(uint64(trial), 7))
		state := filepath.Join(t.TempDir(), "s.db")
		var gotD, gotT []string
		done := false
		for attempt := 0; !done; attempt++ {

			out := filepath.Join(t.TempDir(), fmt.Sprint("out", attempt))
			if err := os.MkdirAll(out, 0o755); err != nil {
				t.Fatal(err)
			}
			if attempt == 1 {
				// events.jsonl cannot be replaced (a directory stands in
				// its place): the pass commits, then fails to write its
				// outputs, as on a full disk, and says so
				if err := os.Mkdir(filepath.Join(out, "events.jsonl"), 0o755); err != nil {
					t.Fatal(err)
				}
			}
			cmd := helper("scan", "--new-state", "--config", cfg, "--state", state, "--out", out)
			if err := cmd.Start(); err != nil {
				t.Fatal(err)
			}
			// passes 0, 2 and 3 are killed at a random point of the pass
			// (the state file, the outbox and the outputs at any stage);
			// pass 1 cannot write its outputs; pass 4 runs undisturbed
			// (most of a file pass is reading; its commits, alert records
			// and outputs come in the last part, where half the kills fall)
			killAt := time.Duration(rng.Float64() * float64(full))
			if rng.IntN(2) == 0 {
				killAt = time.Duration((0.6 + 0.4*rng.Float64()) * float64(full))
			}
			timer := time.AfterFunc(killAt, func() {
				if attempt != 1 && attempt < 4 {
					cmd.Process.Signal(syscall.SIGKILL)
				}
			})
			err := cmd.Wait()
			timer.Stop()
			killed := false
			if ee, ok := err.(*exec.ExitError); ok {
				if ws, ok := ee.Sys().(syscall.WaitStatus); ok && ws.Signaled() {
					killed = true
					kills++
				}
			}
			if attempt == 1 {
				// only what a pass wrote completely counts
			} else if d, tr, ok := outputKeys(t, out); ok {
				gotD, gotT = append(gotD, d...), append(gotT, tr...)
			}
			if attempt == 1 && (err == nil || killed) {
				t.Errorf("trial %d: the pass that could not write its outputs: %v, want exit status 1", trial, err)
			}
			done = attempt >= 4
		}
		gotD, gotT = uniq(gotD), uniq(gotT)
		if strings.Join(gotD, "\n") != strings.Join(refD, "\n") {
			t.Errorf("trial %d: the completed passes list %d drains, the undisturbed scan %d\nlost: %v\nextra: %v", trial, len(gotD), len(refD), head(minus(refD, gotD)), head(minus(gotD, refD)))
		}
		if strings.Join(gotT, "\n") != strings.Join(refT, "\n") {
			t.Errorf("trial %d: the completed passes list %d transitions, the undisturbed scan %d\nlost: %v\nextra: %v", trial, len(gotT), len(refT), minus(refT, gotT), minus(gotT, refT))
		}
	}
	t.Logf("%d trials, %d passes killed at random, a pass that could not write its outputs in each: %d drains and %d transitions, none lost", trials, kills, len(refD), len(refT))
}

// mountTmpfs mounts a tmpfs of size bytes on a new directory and returns
// it (unmounted at the end of the test); it skips the test where mounting
// is not allowed (not root, or no mount(2) in the sandbox).
func mountTmpfs(t *testing.T, size int) string {
	t.Helper()
	dir := t.TempDir()
	if err := syscall.Mount("tmpfs", dir, "tmpfs", 0, fmt.Sprintf("size=%d", size)); err != nil {
		t.Skipf("a small tmpfs for the full-disk test cannot be mounted here (%v): needs root", err)
	}
	t.Cleanup(func() { syscall.Unmount(dir, syscall.MNT_DETACH) })
	return dir
}

// A real full disk (a 48 kB tmpfs): a pass whose outputs directory fills
// up exits 1 naming the device error, and the next pass on a disk with
// room lists every drain and transition the undisturbed scan lists; a pass
// whose state file's disk is full exits 1 too, and what the state file
// already held is intact (state check calls it sound, and a later pass
// over it with room finds the same drains).
func TestFullDisk(t *testing.T) {
	dir := demoPlant(t, "20")
	cfg := filepath.Join(dir, "demo.yaml")
	refOut := t.TempDir()
	if _, _, err := runArgs(t, "scan", "--new-state", "--config", cfg, "--state", filepath.Join(t.TempDir(), "ref.db"), "--out", refOut); err != nil {
		t.Fatal(err)
	}
	refD, refT, _ := outputKeys(t, refOut)
	refD, refT = uniq(refD), uniq(refT)

	// The outputs directory is full.
	state := filepath.Join(t.TempDir(), "s.db")
	full := mountTmpfs(t, 48<<10)
	_, _, err := runArgs(t, "scan", "--new-state", "--config", cfg, "--state", state, "--out", full)
	if exitCode(err) != 1 || !strings.Contains(fmt.Sprint(err), "no space left on device") {
		t.Errorf("scan into a full outputs directory: %v (exit %d), want exit 1 naming the device error", err, exitCode(err))
	}
	out := t.TempDir()
	if _, _, err := runArgs(t, "scan", "--config", cfg, "--state", state, "--out", out); err != nil {
		t.Fatalf("the next pass, with room: %v", err)
	}
	d, tr, _ := outputKeys(t, out)
	if d, tr = uniq(d), uniq(tr); strings.Join(d, "\n") != strings.Join(refD, "\n") || strings.Join(tr, "\n") != strings.Join(refT, "\n") {
		t.Errorf("after the full outputs disk: %d drains and %d transitions listed, want %d and %d\nlost: %v %v", len(d), len(tr), len(refD), len(refT), head(minus(refD, d)), minus(refT, tr))
	}

	// The state file's disk is full: half the history fits, then not the rest.
	sdir := mountTmpfs(t, 256<<10)
	sstate := filepath.Join(sdir, "s.db")
	_, _, err = runArgs(t, "scan", "--new-state", "--config", cfg, "--state", sstate, "--out", t.TempDir())
	if err == nil {
		t.Skip("the whole history fitted in the small state disk; nothing to test")
	}
	if exitCode(err) != 1 || !strings.Contains(fmt.Sprint(err), "no space left on device") {
		t.Errorf("scan with a full state disk: %v (exit %d), want exit 1 naming the device error", err, exitCode(err))
	}
	if out, _, err := runArgs(t, "state", "check", "--state", sstate); err != nil || !strings.Contains(out, "sound") {
		t.Errorf("state check after the full disk: %v\n%s", err, out)
	}
	moved := filepath.Join(t.TempDir(), "s.db")
	b, err := os.ReadFile(sstate)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(moved, b, 0o600); err != nil {
		t.Fatal(err)
	}
	out = t.TempDir()
	if _, _, err := runArgs(t, "scan", "--config", cfg, "--state", moved, "--out", out); err != nil {
		t.Fatalf("the pass after moving the state to a disk with room: %v", err)
	}
	st, err := openStore(moved, false)
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	n := 0
	for _, p := range mustPlans(t, cfg) {
		fits, err := st.Fits(p, 0, 1<<62)
		if err != nil {
			t.Fatal(err)
		}
		n += len(fits)
	}
	if n != len(refD) {
		t.Errorf("after the full state disk and a pass with room: %d fits stored, want the %d of the undisturbed scan", n, len(refD))
	}
	t.Logf("full outputs disk and full state disk: %d drains, %d transitions, none lost or doubled", len(refD), len(refT))
}

// mustPlans lists the tank ids of a config.
func mustPlans(t *testing.T, cfg string) []string {
	t.Helper()
	c, err := config.Load(cfg)
	if err != nil {
		t.Fatal(err)
	}
	var ids []string
	for _, tk := range c.Tanks {
		ids = append(ids, tk.ID)
	}
	return ids
}
