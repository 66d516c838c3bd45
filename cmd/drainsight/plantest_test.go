package main

import (
	"path/filepath"
	"strings"
	"testing"
)

// plan-test on the demo plant: the baseline K from the state file, the
// table of candidates and a recommendation; an unreachable precision is
// said plainly with what would reach it; bad flags are usage errors.
func TestPlanTestCommand(t *testing.T) {
	dir := demoPlant(t, "20")
	cfg := filepath.Join(dir, "demo.yaml")
	out, _, err := runArgs(t, "plan-test", "--config", cfg, "--tank", "KV-SMP-4", "--precision", "0.5%")
	// the demo's sump reads with 4 mm of white noise (model/sim/demo.go):
	// the recent fits say so
	if err != nil || !strings.Contains(out, "from the tank's baseline") || !strings.Contains(out, "noise 4.") || !strings.Contains(out, "Recommended: fill to") || !strings.Contains(out, "licensed practice") {
		t.Errorf("plan-test: %v\n%s", err, out)
	}
	out, _, err = runArgs(t, "plan-test", "--config", cfg, "--tank", "KV-SMP-4", "--precision", "0.01%", "--noise", "5 mm", "--sampling", "30 s")
	if err != nil || !strings.Contains(out, "No test in this tank reaches 0.01 %") || !strings.Contains(out, "sampling every") {
		t.Errorf("unreachable precision: %v\n%s", err, out)
	}
	for _, bad := range [][]string{{"--precision", "x"}, {"--noise", "2 parsecs"}, {"--tank", "NOPE"}} {
		args := append([]string{"plan-test", "--config", cfg, "--tank", "KV-SMP-4"}, bad...)
		if _, _, err := runArgs(t, args...); err == nil || exitCode(err) != 2 {
			t.Errorf("%v: %v, want a usage error", bad, err)
		}
	}
}
