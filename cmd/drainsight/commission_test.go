package main

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"drainsight/scan"
	"drainsight/store"
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
	// The 100 mm bore entered with the wrong unit either way: as 10 mm
	// (its 10 cm written as mm) K is 60 times the ideal; as 100 cm Cd is
	// 0.60/100 = 0.006. Both are said to be implausible.
	for _, c := range []struct{ bore, want string }{
		{"10 mm", "IMPLAUSIBLE: K is above the ideal constant"},
		{"100 cm", "IMPLAUSIBLE: Cd 0.006 is far below the usual sharp-edged orifice"},
	} {
		out, _, err = runArgs(t, args(write("unit.yaml", strings.Replace(bore, "100 mm", c.bore, 1)+"      kind: orifice\n"))...)
		if err != nil || !strings.Contains(out, c.want) {
			t.Errorf("a bore of %s: %v\n%s", c.bore, err, out)
		}
	}
	// --accept refuses the implausible bore and stores the plausible test
	// once; the next scan restarts the baseline at the test with its
	// drains first, and the report shows the record.
	if _, _, err := runArgs(t, append(args(write("wrongbore.yaml", strings.Replace(bore, "100 mm", "60 mm", 1)+"      kind: orifice\n")), "--accept")...); err == nil || !strings.Contains(err.Error(), "implausible") {
		t.Errorf("--accept of an implausible test: %v", err)
	}
	good := write("orifice.yaml", bore+"      kind: orifice\n")
	out, _, err = runArgs(t, append(args(good), "--accept", "--note", "new outlet plate")...)
	if err != nil || !strings.Contains(out, "Accepted as maintenance record 1:") {
		t.Fatalf("--accept: %v\n%s", err, out)
	}
	if out, _, err = runArgs(t, append(args(good), "--accept")...); err != nil || !strings.Contains(out, "already accepted as maintenance record 1") {
		t.Errorf("second --accept: %v\n%s", err, out)
	}
	if out, _, err = runArgs(t, "maintenance", "list", "--config", good, "--state", state); err != nil || !strings.Contains(out, "commissioned") || !strings.Contains(out, "new outlet plate") {
		t.Errorf("maintenance list: %v\n%s", err, out)
	}
	if _, stderr, err := runArgs(t, "scan", "--new-state", "--config", good, "--state", state); err != nil {
		t.Fatalf("scan after --accept: %v\n%s", err, stderr)
	}
	st, err := store.Open(state, time.Second)
	if err != nil {
		t.Fatal(err)
	}
	blob, err := st.DetectorState("KV-SMP-4")
	st.Close()
	var saved scan.SavedState
	if err == nil {
		err = scan.DecodeState(blob, &saved)
	}
	since := time.Date(2026, 1, 5, 0, 0, 0, 0, time.UTC).UnixNano()
	until := since + int64(24*time.Hour)
	if err != nil || saved.Detector == nil {
		t.Fatalf("detector state after the scan: %v", err)
	}
	if d := saved.Detector; d.EpochNs != since || d.LastAction != "commissioned" || d.CommissionUntilNs != until ||
		len(d.Learn) == 0 && len(d.Points) == 0 || len(d.Learn) > 0 && d.Learn[0].TimeNs > until {
		t.Errorf("baseline after the accepted test: epoch %v, action %q, until %v, first baseline drain %+v",
			time.Unix(0, d.EpochNs).UTC(), d.LastAction, time.Unix(0, d.CommissionUntilNs).UTC(), d.Learn)
	}
	if _, _, err := runArgs(t, "report", "--config", good, "--state", state, "--now", "2026-01-12T00:00:00Z"); err != nil {
		t.Fatalf("report: %v", err)
	}
	if md, _ := os.ReadFile(filepath.Join(dir, "report.md")); !strings.Contains(string(md), "| KV-SMP-4 | 2026-01-05 | commissioning test to 2026-01-06 00:00 accepted as the starting baseline") {
		t.Errorf("the report does not show the accepted test:\n%s", md)
	}
	a := args(filepath.Join(dir, "demo.yaml"))
	a[len(a)-3], a[len(a)-1] = "2020-01-01", "2020-01-02"
	if _, _, err := runArgs(t, a...); err == nil || !strings.Contains(err.Error(), "no drain fitted") {
		t.Errorf("a window without drains: %v", err)
	}
}
