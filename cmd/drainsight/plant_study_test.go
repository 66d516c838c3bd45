package main

import (
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"testing"
	"time"

	"drainsight/ingest"
	"drainsight/model"
	"drainsight/model/sim"
)

// plantShape is one vessel of the plant study, with its YAML geometry.
type plantShape struct {
	name, yaml string
	shape      model.Shape
	fillM      float64 // head the tank is filled to, m
}

func plantShapes(t *testing.T) []plantShape {
	st, err := model.NewStrappingTable([]float64{0, 0.4, 1.0, 1.8, 2.5}, []float64{0, 0.3, 1.5, 4.0, 6.5})
	if err != nil {
		t.Fatal(err)
	}
	return []plantShape{
		{"vertical", "{shape: vertical_cylinder, diameter: 1.8 m, height: 2.6 m}", model.VerticalCylinder{DiameterM: 1.8, InternalHeightM: 2.6}, 2.3},
		{"rectangular", "{shape: rectangular, length: 2 m, width: 1.5 m, height: 2 m}", model.Rectangular{LengthM: 2, WidthM: 1.5, InternalHeightM: 2}, 1.8},
		{"horizontal", "{shape: horizontal_cylinder, diameter: 2 m, length: 4 m}", model.HorizontalCylinder{DiameterM: 2, LengthM: 4}, 1.9},
		{"sphere", "{shape: sphere, diameter: 2.5 m}", model.Sphere{DiameterM: 2.5}, 2.35},
		// the cone as tall as the cylinder is wide, outlet at the apex
		{"cone_apex", "{shape: cone_bottom_cylinder, diameter: 2 m, height: 4.5 m, cone_height: 2 m}",
			model.ConeBottomCylinder{DiameterM: 2, ConeHeightM: 2, CylinderHeightM: 2.5}, 4.3},
		{"strapping", "{shape: strapping_table, points: [[0 m, 0 m3], [0.4 m, 0.3 m3], [1.0 m, 1.5 m3], [1.8 m, 4.0 m3], [2.5 m, 6.5 m3]]}", st, 2.4},
	}
}

// TestPlantStudy runs a healthy plant the project has not been tuned on
// end to end through "scan --final": every vessel shape, each with four
// sensors (10-30 s sampling, 1-3 mm noise, one with 1 mm counts),
// two months of operation with partial drains, falls with the feed still
// running (15 % of drains, 30-70 % of the outlet flow) and routine data
// gaps (about one per 12 days, 10 min to 8 h). Truth is the project's
// simulator (model/sim). Targets from issue 9: drain recall >= 99 % on
// every shape, precision >= 99 % counting every event written, and no
// tank finding on these healthy tanks (a data gap is the feed's status,
// never a finding; goal <= 0.1 per healthy tank-year). Run with -v for
// the table in DEVELOPERS.md.
func TestPlantStudy(t *testing.T) {
	if testing.Short() {
		t.Skip("plant study: two months of 24 tanks (skipped with -short)")
	}
	days := 60.0
	if raceEnabled {
		days = 20 // the same plant, a third of the history: under the race detector it runs 5-10 times slower
	}
	start := time.Date(2031, 2, 1, 0, 0, 0, 0, time.UTC)
	end := start.Add(time.Duration(days * 24 * float64(time.Hour)))
	sensors := []struct {
		dt     time.Duration
		noiseM float64
		quantM float64
	}{{10 * time.Second, 0.002, 0}, {20 * time.Second, 0.001, 0.001}, {30 * time.Second, 0.003, 0}, {15 * time.Second, 0.002, 0}}
	dir := t.TempDir()
	var yaml strings.Builder
	yaml.WriteString("tanks:\n")
	type tankTruth struct {
		shape string
		truth sim.Truth
	}
	truths := map[string]tankTruth{}
	gapsTotal := 0
	for si, sh := range plantShapes(t) {
		for j, sen := range sensors {
			id := fmt.Sprintf("%s-%d", sh.name, j)
			rng := rand.New(rand.NewPCG(41, uint64(10*si+j)))
			tk := model.Tank{ID: id, Shape: sh.shape, OutletDiamM: 0.05, DatumKnown: true}
			ht, err := model.NewHeadTransform(&tk)
			if err != nil {
				t.Fatal(err)
			}
			// a full drain of 20-60 min sets K
			k := ht.F(sh.fillM) / (60 * (20 + 40*rng.Float64()))
			var faults []sim.Fault
			for at := start.Add(time.Duration(rng.ExpFloat64() * 12 * 24 * float64(time.Hour))); at.Before(end); at = at.Add(time.Duration(rng.ExpFloat64() * 12 * 24 * float64(time.Hour))) {
				d := time.Duration(math.Exp(math.Log(10)+rng.Float64()*math.Log(48)) * float64(time.Minute)) // 10 min-8 h, log-uniform
				faults = append(faults, sim.Fault{Kind: sim.DataGap, Start: at, End: at.Add(d)})
				gapsTotal++
			}
			spec := sim.TankSpec{Tank: tk, KM25s: k, SampleEvery: sen.dt, NoiseM: sen.noiseM, QuantumM: sen.quantM,
				FillToM: sh.fillM, DrainsPerDay: 3, PartialDrainShare: 0.3, InflowDuringDrainShare: 0.15, Faults: faults}
			ser, tr := sim.Simulate(spec, start, end, rng)
			truths[id] = tankTruth{sh.name, tr}
			f, err := os.Create(filepath.Join(dir, id+".csv"))
			if err != nil {
				t.Fatal(err)
			}
			if err := ingest.WriteCSV(f, id, ser.TimeNs, ser.HeadM); err != nil {
				t.Fatal(err)
			}
			f.Close()
			fmt.Fprintf(&yaml, "  - id: %s\n    geometry: %s\n    outlet: {diameter: 50 mm, elevation: 0 m}\n    sensor: {kind: depth, unit: m}\n    source: {format: csv, paths: [%s.csv]}\n",
				id, sh.yaml, id)
		}
	}
	yaml.WriteString("outputs: {directory: out}\n")
	cfg := filepath.Join(dir, "plant.yaml")
	if err := os.WriteFile(cfg, []byte(yaml.String()), 0o644); err != nil {
		t.Fatal(err)
	}
	out, stderr, err := runArgs(t, "scan", "--new-state", "--config", cfg, "--final")
	if err != nil {
		t.Fatalf("scan: %v\n%s\n%s", err, out, stderr)
	}
	type score struct{ clean, found, pumped, written, good, pumpedWritten int }
	byShape := map[string]*score{}
	events := readJSONL(t, filepath.Join(dir, "out", "events.jsonl"))
	byTank := map[string][]map[string]any{}
	for _, e := range events {
		byTank[e["tank"].(string)] = append(byTank[e["tank"].(string)], e)
	}
	var missed []string
	defer func() {
		for _, m := range missed {
			t.Log(m)
		}
	}()
	for id, tt := range truths {
		sc := byShape[tt.shape]
		if sc == nil {
			sc = &score{}
			byShape[tt.shape] = sc
		}
		dr := tt.truth.Drains
		// A drain with no samples for part of it cannot be scored: it is
		// treated as not simulated.
		inGap := func(d sim.DrainTruth) bool {
			for _, f := range tt.truth.Faults {
				if f.Kind == sim.DataGap && f.Start.UnixNano() < d.EndNs+int64(10*time.Minute) && f.End.UnixNano() > d.StartNs-int64(10*time.Minute) {
					return true
				}
			}
			return false
		}
		scored := func(d sim.DrainTruth) bool {
			return d.EndNs < end.UnixNano()-int64(2*time.Hour) && d.StartNs > start.UnixNano()+int64(12*time.Hour) && !inGap(d)
		}
		found := make([]bool, len(dr))
		for _, d := range dr {
			if d.InflowM3s > 0 {
				sc.pumped++
			} else if scored(d) {
				sc.clean++ // not cut by the start (warm-up), the end of the history or a data gap
			}
		}
		for _, e := range byTank[id] {
			sc.written++
			s, _ := time.Parse(time.RFC3339Nano, e["start"].(string))
			en, _ := time.Parse(time.RFC3339Nano, e["end"].(string))
			best, bestOv := -1, int64(0)
			for j, d := range dr {
				if ov := min(en.UnixNano(), d.EndNs) - max(s.UnixNano(), d.StartNs); ov > bestOv {
					best, bestOv = j, ov
				}
			}
			switch {
			case best < 0:
			case dr[best].InflowM3s > 0:
				sc.pumpedWritten++
				if testing.Verbose() {
					d := dr[best]
					t.Logf("%s: fall with a feed of %.0f %% of the outlet flow written: h %.2f -> %.2f, %.0f min, K/K_true %.3f, exponent %v, grade %v",
						id, 100*d.InflowM3s/(d.KM25s*math.Sqrt(d.H0M)), d.H0M, d.H1M, float64(d.EndNs-d.StartNs)/6e10, e["k_m25_s"].(float64)/d.KM25s, e["exponent"], e["quality"])
				}
			default:
				sc.good++
				d := dr[best]
				if !found[best] && scored(d) {
					found[best] = true
					sc.found++
				}
			}
		}
		for j, d := range dr {
			if !found[j] && d.InflowM3s == 0 && scored(d) {
				missed = append(missed, fmt.Sprintf("%s: clean drain at %s not written: h %.2f -> %.2f, %.0f min, complete %v",
					id, time.Unix(0, d.StartNs).UTC().Format(time.DateTime), d.H0M, d.H1M, float64(d.EndNs-d.StartNs)/6e10, d.Complete))
			}
		}
	}
	var falseFindings []string
	feedNotices := 0
	for _, f := range readJSONL(t, filepath.Join(dir, "out", "findings.jsonl")) {
		if f["status"] != "new" {
			continue
		}
		if f["kind"] == "feed" {
			feedNotices++
			continue
		}
		falseFindings = append(falseFindings, fmt.Sprintf("%s %s/%v at %v: %v", f["tank"], f["kind"], f["subtype"], f["status_at"], f["evidence"]))
	}
	var b strings.Builder
	fmt.Fprintln(&b, "| shape | clean drains | found % | pumped falls | events written | precision % | pumped falls written |")
	fmt.Fprintln(&b, "|---|---|---|---|---|---|---|")
	var all score
	names := make([]string, 0, len(byShape))
	for n := range byShape {
		names = append(names, n)
	}
	sort.Strings(names)
	for _, n := range names {
		sc := byShape[n]
		fmt.Fprintf(&b, "| %s | %d | %.1f | %d | %d | %.2f | %d |\n", n, sc.clean, 100*float64(sc.found)/float64(sc.clean), sc.pumped,
			sc.written, 100*float64(sc.good)/float64(sc.written), sc.pumpedWritten)
		all.clean += sc.clean
		all.found += sc.found
		all.pumped += sc.pumped
		all.written += sc.written
		all.good += sc.good
		all.pumpedWritten += sc.pumpedWritten
		if r := float64(sc.found) / float64(sc.clean); r < 0.99 {
			t.Errorf("%s: drain recall %.4f, want >= 0.99", n, r)
		}
	}
	fmt.Fprintf(&b, "| all | %d | %.1f | %d | %d | %.2f | %d |\n", all.clean, 100*float64(all.found)/float64(all.clean), all.pumped,
		all.written, 100*float64(all.good)/float64(all.written), all.pumpedWritten)
	tankYears := float64(len(truths)) * days / 365.25
	fmt.Fprintf(&b, "\n%.1f healthy tank-years, %d routine data gaps: %d false tank findings (%.2f per tank-year), %d feed notices\n",
		tankYears, gapsTotal, len(falseFindings), float64(len(falseFindings))/tankYears, feedNotices)
	t.Log("\n" + b.String())
	if p := float64(all.good) / float64(all.written); p < 0.99 {
		t.Errorf("precision %.4f counting every event written, want >= 0.99", p)
	}
	for _, f := range falseFindings {
		t.Errorf("finding on a healthy tank: %s", f)
	}
}
