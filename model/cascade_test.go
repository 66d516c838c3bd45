package model_test

import (
	"bufio"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"drainsight/model"
)

// twoTanks integrates an upper tank A draining through its outlet into a
// lower tank B, which drains freely through its own outlet, by classical
// fourth-order Runge-Kutta in steps of 0.05 s (written here, independent
// of the project's simulator):
//
//	A_A dhA/dt = -K_A sgn(Δ) sqrt(|Δ|),  Δ = hA - max(hB - zA, 0)
//	A_B dhB/dt = +K_A sgn(Δ) sqrt(|Δ|) - K_B sqrt(hB)
//
// hA is A's head above its outlet, hB B's level above its outlet, zA the
// height of A's outlet above B's (a common plant datum). It samples both
// every dtS seconds for durS seconds.
func twoTanks(areaA, areaB, kA, kB, zA, hA, hB, dtS, durS float64) (ts, ha, hb []float64) {
	flow := func(a, b float64) (float64, float64) {
		d := max(a, 0) - max(b-zA, 0)
		q := kA * math.Copysign(math.Sqrt(math.Abs(d)), d)
		return -q / areaA, (q - kB*math.Sqrt(max(b, 0))) / areaB
	}
	const h = 0.05
	next := 0.0
	for t := 0.0; t <= durS+1e-9; t += h {
		if t >= next-1e-9 {
			ts, ha, hb = append(ts, t), append(ha, hA), append(hb, hB)
			next += dtS
		}
		a1, b1 := flow(hA, hB)
		a2, b2 := flow(hA+h/2*a1, hB+h/2*b1)
		a3, b3 := flow(hA+h/2*a2, hB+h/2*b2)
		a4, b4 := flow(hA+h*a3, hB+h*b3)
		hA += h / 6 * (a1 + 2*a2 + 2*a3 + a4)
		hB += h / 6 * (b1 + 2*b2 + 2*b3 + b4)
	}
	return ts, ha, hb
}

// TestSubmergedOutletTwoTanks: tank A drains into tank B, whose level rises
// above A's outlet during the drain. With B's level given (SubmergedM) the
// drain is found, K comes out within its interval of the integrated truth
// and the exponent near 1/2; fitted as a free outlet the same drain gives
// a K and an exponent far off.
func TestSubmergedOutletTwoTanks(t *testing.T) {
	const (
		dA, dB = 1.2, 1.0 // m
		zA     = 0.6      // A's outlet above B's, m
		dtS    = 5.0
		noiseM = 0.001
	)
	areaA, areaB := math.Pi/4*dA*dA, math.Pi/4*dB*dB
	// 40 mm and 25 mm outlets with Cd 0.61 (sharp-edged orifice, common practice)
	kA := 0.61 * math.Pi / 4 * 0.04 * 0.04 * model.Sqrt2g
	kB := 0.61 * math.Pi / 4 * 0.025 * 0.025 * model.Sqrt2g
	// 30 min of hold, then the valve opens (modelled by starting the
	// integration then), 90 min of drain.
	ts, ha, hb := twoTanks(areaA, areaB, kA, kB, zA, 1.8, 0.3, dtS, 5400)
	rng := rand.New(rand.NewPCG(5, 6))
	var s model.Series
	const holdS = 1800.0
	for i := 0.0; i < holdS; i += dtS {
		s.Append(int64(i*1e9), 1.8+noiseM*rng.NormFloat64())
		s.SubmergedM = append(s.SubmergedM, 0.3-zA+noiseM*rng.NormFloat64())
	}
	maxSub := 0.0
	for i := range ts {
		s.Append(int64((holdS+ts[i])*1e9), ha[i]+noiseM*rng.NormFloat64())
		s.SubmergedM = append(s.SubmergedM, hb[i]-zA+noiseM*rng.NormFloat64())
		maxSub = max(maxSub, hb[i]-zA)
	}
	if maxSub < 0.3 {
		t.Fatalf("test set-up: B rises only %.2f m above A's outlet", maxSub)
	}
	tk := model.Tank{ID: "A", Shape: model.VerticalCylinder{DiameterM: dA, InternalHeightM: 2.2}, DatumKnown: true}
	var drains []model.Segment
	for _, g := range model.SegmentSeries(&tk, &s, model.SegmentOptions{Settle: -1}) {
		if g.Kind == model.Drain {
			drains = append(drains, g)
		}
	}
	if len(drains) != 1 {
		t.Fatalf("%d drains, want 1", len(drains))
	}
	g := drains[0]
	if g.SubmergedM == nil || len(g.SubmergedM) != len(g.TimeNs) {
		t.Fatalf("drain without its receiving levels")
	}
	f, err := model.FitDrain(&tk, &g, model.FitOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if f.Method != "submerged" || !(f.KLo95M25s <= kA && kA <= f.KHi95M25s) || math.Abs(f.KM25s/kA-1) > 0.01 {
		t.Errorf("submerged fit: method %s, K %.5g [%.5g, %.5g], truth %.5g", f.Method, f.KM25s, f.KLo95M25s, f.KHi95M25s, kA)
	}
	if math.Abs(f.Exponent-0.5) > max(3*f.ExponentSE, 0.01) {
		t.Errorf("submerged fit: exponent %.4f ± %.4f, want 0.5", f.Exponent, f.ExponentSE)
	}
	free := g
	free.SubmergedM = nil
	ff, err := model.FitDrain(&tk, &free, model.FitOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(ff.KM25s/kA-1) < 0.05 {
		t.Errorf("free-outlet fit of a submerged drain: K %.5g within 5 %% of the truth %.5g; the test would not tell", ff.KM25s, kA)
	}
	t.Logf("submerged: K/K_true %.4f ± %.4f, exponent %.3f ± %.3f; as a free outlet: K/K_true %.3f, exponent %.3f",
		f.KM25s/kA, f.KSEM25s/kA, f.Exponent, f.ExponentSE, ff.KM25s/kA, ff.Exponent)

	// Coverage: the same drain read with fresh noise, 200 times; the
	// 95 % interval must hold the truth 90-99 % of the time (93-97 %
	// is the goal; ±2 % is the binomial scatter of 200 replicates).
	covered, reps := 0, 200
	for range reps {
		r := model.Segment{Kind: model.Drain, EmptyHeadM: math.NaN(), TimeNs: g.TimeNs}
		for _, tn := range g.TimeNs {
			k := int(math.Round((float64(tn)/1e9 - holdS) / dtS))
			r.HeadM = append(r.HeadM, ha[k]+noiseM*rng.NormFloat64())
			r.SubmergedM = append(r.SubmergedM, hb[k]-zA+noiseM*rng.NormFloat64())
		}
		fr, err := model.FitDrain(&tk, &r, model.FitOptions{})
		if err == nil && fr.KLo95M25s <= kA && kA <= fr.KHi95M25s {
			covered++
		}
	}
	if c := float64(covered) / float64(reps); c < 0.90 || c > 0.99 {
		t.Errorf("submerged fit: 95 %% intervals cover the truth in %.1f %% of %d replicates, want 90-99 %%", 100*c, reps)
	} else {
		t.Logf("submerged fit: coverage %.1f %% of %d replicates", 100*c, reps)
	}
}

// TestSubmergedOutletReversedFlow: flow back through the outlet (the
// receiving level above the tank's own) is the same law with the sign of
// the head: the volume balance holds both ways.
func TestSubmergedOutletReversedFlow(t *testing.T) {
	// A at 0.5 m, B held at 0.9 m above A's outlet by its feed: A fills
	// through its outlet. Only the balance is checked, on a rise, so the
	// segment is built by hand.
	const k = 0.002
	area := math.Pi / 4
	var g model.Segment
	h := 0.5
	for i := 0; i <= 600; i++ {
		ti := float64(i)
		g.TimeNs = append(g.TimeNs, int64(ti*1e9))
		g.HeadM = append(g.HeadM, h)
		g.SubmergedM = append(g.SubmergedM, 0.9)
		for range 20 {
			d := h - 0.9
			h += 0.05 * (-k * math.Copysign(math.Sqrt(math.Abs(d)), d) / area)
		}
	}
	g.Kind, g.EmptyHeadM = model.Drain, math.NaN()
	tk := model.Tank{Shape: model.VerticalCylinder{DiameterM: 1, InternalHeightM: 2}, DatumKnown: true}
	f, err := model.FitDrain(&tk, &g, model.FitOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(f.KM25s/k-1) > 1e-3 {
		t.Errorf("reversed flow: K %.6g, want %.6g", f.KM25s, k)
	}
}

// TestThreeTankRecording fits the real three-tank rig (MIT licence, from
// github.com/scientificprogrammer123/interconnected-water-tank-system_particle-filter-fault-detection,
// folder 17_3tank_dynamics_with_leakage2_trial2/, commit b61e691; see
// ../shared/refdata/three-tank-leak/PROVENANCE.md, read from there and
// never copied into the project). After the pumps stop (t ≈ 105 s) tanks 1
// and 3 drain into tank 2 through square-root-law links in the level
// difference. The sensors read volts with no conversion given, so levels
// are V - V(0) (the tanks stand level at t = 0, PROVENANCE.md) on a tank of
// unit area: the exponent does not depend on the scale. Fitted as free
// outlets their exponent is far below 1/2; with tank 2's level as the
// receiving level it is near 1/2 and the balance fits closely.
func TestThreeTankRecording(t *testing.T) {
	dir := filepath.Join("..", "..", "shared", "refdata", "three-tank-leak")
	if _, err := os.Stat(dir); err != nil {
		t.Skipf("the three-tank recording is not at %s (see the test's comment for its source): %v", dir, err)
	}
	read := func(n string) (ts, v []float64) {
		fh, err := os.Open(filepath.Join(dir, "pressure_sensor_data_tank"+n+".csv"))
		if err != nil {
			t.Fatal(err)
		}
		defer fh.Close()
		sc := bufio.NewScanner(fh)
		line := 0
		for sc.Scan() {
			line++
			if line <= 2 {
				continue
			}
			c := strings.Split(sc.Text(), ",")
			if len(c) < 11 {
				t.Fatalf("tank %s line %d: %d columns", n, line, len(c))
			}
			// the measurement timestamp (columns 6-9) and the voltage (11)
			var x [5]float64
			for i, j := range []int{5, 6, 7, 8, 10} {
				if x[i], err = strconv.ParseFloat(strings.TrimSpace(c[j]), 64); err != nil {
					t.Fatalf("tank %s line %d column %d: %v", n, line, j+1, err)
				}
			}
			ts = append(ts, 3600*x[0]+60*x[1]+x[2]+x[3])
			v = append(v, x[4])
		}
		return ts, v
	}
	t2, v2 := read("2")
	for _, n := range []string{"1", "3"} {
		ts, v := read(n)
		if len(ts) != len(t2) {
			t.Fatalf("tank %s: %d samples, tank 2 %d", n, len(ts), len(t2))
		}
		// The drain after the pumps stop: from 3 s after the tank's peak
		// to the end of the recording.
		peak := 0
		for i := range v {
			if v[i] > v[peak] {
				peak = i
			}
		}
		const lift = 1 // a common offset keeps both levels above the outlet; it cancels in the difference
		var g model.Segment
		g.Kind, g.EmptyHeadM = model.Drain, math.NaN()
		for i := peak + 3; i < len(ts); i++ {
			g.TimeNs = append(g.TimeNs, int64((ts[i]-ts[0])*1e9))
			g.HeadM = append(g.HeadM, lift+v[i]-v[0])
			g.SubmergedM = append(g.SubmergedM, lift+v2[i]-v2[0])
		}
		tk := model.Tank{ID: "tank" + n, Shape: model.VerticalCylinder{DiameterM: math.Sqrt(4 / math.Pi), InternalHeightM: 10}, DatumKnown: true}
		linked, err := model.FitDrain(&tk, &g, model.FitOptions{})
		if err != nil {
			t.Fatal(err)
		}
		free := g
		free.SubmergedM = nil
		for i := range free.HeadM {
			free.HeadM[i] -= lift
		}
		fr, err := model.FitDrain(&tk, &free, model.FitOptions{})
		if err != nil {
			t.Fatal(err)
		}
		t.Logf("tank %s, %d samples: with tank 2 as receiving level exponent %.3f ± %.3f, R² %.5f, grade %s; as a free outlet exponent %.3f, R² %.5f",
			n, len(g.TimeNs), linked.Exponent, linked.ExponentSE, linked.R2, linked.Quality, fr.Exponent, fr.R2)
		// Targets (issue 8): exponent near 1/2 and a good fit once the
		// difference is used; 0.1 is the B-grade exponent limit.
		if math.Abs(linked.Exponent-0.5) > 0.1 || linked.R2 < 0.999 {
			t.Errorf("tank %s with the receiving level: exponent %.3f, R² %.5f; want within 0.1 of 0.5 and R² ≥ 0.999", n, linked.Exponent, linked.R2)
		}
		if math.Abs(fr.Exponent-0.5) < math.Abs(linked.Exponent-0.5) {
			t.Errorf("tank %s: the free-outlet exponent %.3f is nearer 1/2 than the linked one %.3f", n, fr.Exponent, linked.Exponent)
		}
	}
}
