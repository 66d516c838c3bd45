package model

import (
	"math"
	"math/rand/v2"
	"strings"
	"testing"
)

func idleSeg(n int, dt float64, level func(ts float64) float64, sigma float64, seed uint64) *Segment {
	rng := rand.New(rand.NewPCG(seed, 3))
	seg := &Segment{Tank: "i1", Kind: Idle, Spikes: 2, GapCount: 1}
	for i := range n {
		ts := float64(i) * dt
		seg.TimeNs = append(seg.TimeNs, int64(i)*int64(dt*1e9))
		seg.HeadM = append(seg.HeadM, level(ts)+sigma*rng.NormFloat64())
	}
	return seg
}

func TestFitIdleFlat(t *testing.T) {
	tank := &Tank{ID: "i1", Shape: VerticalCylinder{DiameterM: 2, InternalHeightM: 3}, DatumKnown: true}
	seg := idleSeg(2000, 30, func(float64) float64 { return 1.5 }, 0.002, 1)
	f, err := FitIdle(tank, seg)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(f.RateMs) > 4*f.RateSEMs {
		t.Errorf("rate got %g ± %g, want 0", f.RateMs, f.RateSEMs)
	}
	// SE of an OLS slope: σ/sqrt(Σ(t-t̄)^2), Σ(t-t̄)^2 = dt^2 n(n^2-1)/12.
	wantSE := 0.002 / math.Sqrt(30*30*2000*(2000*2000-1)/12.0)
	if math.Abs(f.RateSEMs-wantSE) > 0.1*wantSE {
		t.Errorf("rate SE got %g, want %g ± 10 %%", f.RateSEMs, wantSE)
	}
	if math.Abs(f.NoiseM-0.002) > 0.0002 {
		t.Errorf("noise got %g, want 0.002 ± 0.0002", f.NoiseM)
	}
	if math.Abs(f.LeakKM25s) > 4*f.LeakKSEM25s {
		t.Errorf("leak got %g ± %g, want 0", f.LeakKM25s, f.LeakKSEM25s)
	}
	if math.Abs(f.MeanHeadM-1.5) > 0.001 {
		t.Errorf("mean head got %g, want 1.5", f.MeanHeadM)
	}
	if f.Spikes != 2 || f.GapCount != 1 || f.N != 2000 {
		t.Errorf("counts got spikes %d gaps %d N %d, want 2 1 2000", f.Spikes, f.GapCount, f.N)
	}
}

// A leak of K_leak = 2e-5 m^2.5/s through the shell of a sphere.
func TestFitIdleLeak(t *testing.T) {
	tank := &Tank{ID: "i1", Shape: Sphere{DiameterM: 3}, DatumKnown: true}
	const kLeak = 2e-5
	seg := idleSeg(3000, 10, func(ts float64) float64 { return DrainHeadM(tank, kLeak, 2.0, ts) }, 0.001, 2)
	f, err := FitIdle(tank, seg)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(f.LeakKM25s-kLeak) > 4*f.LeakKSEM25s {
		t.Errorf("leak got %g ± %g, want %g", f.LeakKM25s, f.LeakKSEM25s, kLeak)
	}
	if !(f.RateMs < 0) {
		t.Errorf("rate got %g, want negative", f.RateMs)
	}
}

func TestFitIdleFlatRunAndSpikes(t *testing.T) {
	tank := &Tank{ID: "i1", Shape: VerticalCylinder{DiameterM: 2, InternalHeightM: 3}}
	seg := idleSeg(100, 60, func(float64) float64 { return 1 }, 0.001, 3)
	for i := 40; i < 57; i++ {
		seg.HeadM[i] = 1.0004
	}
	seg.HeadM[80] = 1.5 // a spike must not move the rate
	f, err := FitIdle(tank, seg)
	if err != nil {
		t.Fatal(err)
	}
	if got, want := f.FlatRun, 17; got != want {
		t.Errorf("flat run got %d, want %d", got, want)
	}
	if got, want := f.N, 99; got != want {
		t.Errorf("N got %d, want %d (spike dropped)", got, want)
	}
}

func TestFitIdleErrors(t *testing.T) {
	tank := &Tank{ID: "i1", Shape: VerticalCylinder{DiameterM: 2, InternalHeightM: 3}}
	for _, tc := range []struct {
		seg  *Segment
		want string
	}{
		{nil, "nil segment"},
		{&Segment{Tank: "i1", TimeNs: []int64{1, 2}, HeadM: []float64{1}}, `tank "i1": 2 times but 1 heads`},
		{&Segment{Tank: "i1", TimeNs: []int64{1, 2}, HeadM: []float64{1, 1}}, "need at least 3"},
	} {
		if _, err := FitIdle(tank, tc.seg); err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("got %v, want error containing %q", err, tc.want)
		}
	}
	// Readings below the outlet: no leak constant, but a rate.
	seg := idleSeg(50, 60, func(float64) float64 { return -0.1 }, 0.001, 4)
	f, err := FitIdle(tank, seg)
	if err != nil || !math.IsNaN(f.LeakKM25s) {
		t.Errorf("below outlet: got leak %g err %v, want NaN and nil", f.LeakKM25s, err)
	}
}

// The noise of an idle period with a leak is the transmitter's, not the
// bow of the leak's curve about a line: 12 h of a Torricelli leak at
// 80 mm/h from 3 m in a cylinder, 1 mm white noise, sampled at 10 s. The
// MAD scale estimates σ (Hampel's consistency constant 1.4826 for normal
// data, common practice); tolerance 10 % for 4320 readings.
func TestFitIdleNoiseUnderLeakCurve(t *testing.T) {
	tank := &Tank{ID: "i1", Shape: VerticalCylinder{DiameterM: 1.6, InternalHeightM: 3.6}, DatumKnown: true}
	a := tank.Shape.AreaM2(3)
	kLeak := 0.08 / 3600 * a / math.Sqrt(3) // 80 mm/h at 3 m
	for seed := uint64(1); seed <= 5; seed++ {
		seg := idleSeg(4320, 10, func(ts float64) float64 { return DrainHeadM(tank, kLeak, 3.0, ts) }, 0.001, seed)
		f, err := FitIdle(tank, seg)
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(f.NoiseM-0.001) > 0.0001 {
			t.Errorf("seed %d: noise got %.3g m, want 0.001 ± 10 %% (the leak's bow is not noise)", seed, f.NoiseM)
		}
	}
}

// On level idle periods with white noise the scatter about a quadratic
// never falls to idleBowShare of the scatter about a line, so FitIdle's
// noise stays the line's (its value the trend tests were calibrated on).
func TestIdleQuadScaleAgreesOnWhiteNoise(t *testing.T) {
	for _, n := range []int{idleBowMinN, 4000} {
		lo := math.Inf(1)
		for seed := uint64(1); seed <= 200; seed++ {
			seg := idleSeg(n, 10, func(float64) float64 { return 1.2 }, 0.002, seed)
			keep := make([]bool, n)
			for i := range keep {
				keep[i] = true
			}
			res, buf := make([]float64, n), make([]float64, n)
			q := idleQuadScale(seg.TimeNs, seg.HeadM, keep, res, buf)
			f, err := FitIdle(&Tank{ID: "i1", Shape: VerticalCylinder{DiameterM: 2, InternalHeightM: 3}}, seg)
			if err != nil {
				t.Fatal(err)
			}
			lo = min(lo, q/f.NoiseM)
		}
		if lo < idleBowShare+0.05 {
			t.Errorf("n %d: smallest quadratic/line scale ratio %.3f over 200 seeds, want above %.2f", n, lo, idleBowShare+0.05)
		}
		t.Logf("n %d: smallest quadratic/line scale ratio %.3f", n, lo)
	}
}
