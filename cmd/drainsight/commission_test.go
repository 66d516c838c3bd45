package main

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// commission on the demo plant's sump (a 100 mm bore the simulator drives
// with Cd 0.60, model/sim/demo.go): the ideal K of the bore is
// π/4 · 0.1² · sqrt(2 · 9.80665) = 0.034783 m^2.5/s (standard gravity, CGPM
// 1901), the measured Cd 0.600 is plausible for a sharp-edged orifice, and a
// bore entered as 60 mm makes K exceed the ideal: said as implausible.
func TestCommissionCommand(t *testing.T) {
	dir := demoPlant(t, "20")
	y, err := os.ReadFile(filepath.Join(dir, "demo.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	const bore = "    outlet:\n      diameter: 100 mm\n      elevation: 0.1 m\n"
	if !strings.Contains(string(y), bore) {
		t.Fatalf("demo.yaml has no sump outlet block:\n%s", y)
	}
	write := func(name, block string) string {
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, []byte(strings.Replace(string(y), bore, block, 1)), 0o600); err != nil {
			t.Fatal(err)
		}
		return p
	}
	state := filepath.Join(dir, "state.db")
	args := func(cfg string) []string {
		return []string{"commission", "--config", cfg, "--state", state, "--tank", "KV-SMP-4", "--since", "2026-01-05", "--until", "2026-01-06"}
	}
	out, _, err := runArgs(t, args(write("orifice.yaml", bore+"      kind: orifice\n"))...)
	if err != nil || !strings.Contains(out, "Ideal K of the 100 mm bore (Cd = 1): 0.03478") || !strings.Contains(out, "measured Cd 0.600") || !strings.Contains(out, "Plausible:") {
		t.Errorf("commission of the sump: %v\n%s", err, out)
	}
	out, _, err = runArgs(t, args(write("wrongbore.yaml", strings.Replace(bore, "100 mm", "60 mm", 1)+"      kind: orifice\n"))...)
	if err != nil || !strings.Contains(out, "IMPLAUSIBLE: K is above the ideal constant") {
		t.Errorf("a 60 mm bore: %v\n%s", err, out)
	}
	a := args(filepath.Join(dir, "demo.yaml"))
	a[len(a)-3], a[len(a)-1] = "2020-01-01", "2020-01-02"
	if _, _, err := runArgs(t, a...); err == nil || !strings.Contains(err.Error(), "no drain fitted") {
		t.Errorf("a window without drains: %v", err)
	}
}
