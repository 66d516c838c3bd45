package model

import (
	"math"
	"testing"
)

// Closed forms of F(h) = ∫_0^h A(s)/sqrt(s) ds, derived by hand for the test
// (the drain-time formulas of REFERENCES.md §3d are (F(h0)-F(h1))/K).
func TestHeadTransformClosedForms(t *testing.T) {
	r, l := 1.3, 2.5
	hc, rc := 1.2, 0.9
	tests := []struct {
		name string
		tank Tank
		f    func(h float64) float64
	}{
		{"sphere", Tank{Shape: Sphere{DiameterM: 2 * r}}, func(h float64) float64 {
			return math.Pi * (4.0/3*r*math.Pow(h, 1.5) - 0.4*math.Pow(h, 2.5))
		}},
		{"horizontal", Tank{Shape: HorizontalCylinder{DiameterM: 2 * r, LengthM: l}}, func(h float64) float64 {
			return 4 * l / 3 * (math.Pow(2*r, 1.5) - math.Pow(2*r-h, 1.5))
		}},
		{"cone part", Tank{Shape: ConeBottomCylinder{DiameterM: 2 * rc, ConeHeightM: hc, CylinderHeightM: 1}}, func(h float64) float64 {
			a := math.Pi * rc * rc
			if h <= hc {
				return 0.4 * a / (hc * hc) * math.Pow(h, 2.5)
			}
			return 0.4*a*math.Sqrt(hc) + 2*a*(math.Sqrt(h)-math.Sqrt(hc))
		}},
		{"sphere raised outlet", Tank{Shape: Sphere{DiameterM: 2 * r}, OutletElevM: 0.3}, func(h float64) float64 {
			// A(s) = pi (s+e)(2r-s-e): integrate s^(-1/2)(c0 + c1 s + c2 s^2).
			e := 0.3
			c0 := math.Pi * e * (2*r - e)
			c1 := math.Pi * (2*r - 2*e)
			c2 := -math.Pi
			return 2*c0*math.Sqrt(h) + c1*2.0/3*math.Pow(h, 1.5) + c2*0.4*math.Pow(h, 2.5)
		}},
		{"cylinder", Tank{Shape: VerticalCylinder{DiameterM: 1.1, InternalHeightM: 3}, OutletElevM: 0.2}, func(h float64) float64 {
			return 2 * math.Pi * 0.25 * 1.1 * 1.1 * math.Sqrt(h)
		}},
	}
	for _, tc := range tests {
		ht, err := NewHeadTransform(&tc.tank)
		if err != nil {
			t.Fatalf("%s: %v", tc.name, err)
		}
		hmax := ht.MaxHeadM()
		worst := 0.0
		for i := 1; i <= 997; i++ {
			h := hmax * float64(i) / 997
			if tc.name == "cone part" && math.Abs(h-hc) < 0.01 {
				continue // kink of the area: only du^2 accurate there
			}
			got, want := ht.F(h), tc.f(h)
			rel := math.Abs(got-want) / want
			worst = math.Max(worst, rel)
			if back := ht.Inv(got); math.Abs(back-h) > 1e-9*h+1e-12 {
				t.Errorf("%s: Inv(F(%g)) = %g", tc.name, h, back)
			}
		}
		if worst > 1e-9 {
			t.Errorf("%s: worst relative error of F %g, want <= 1e-9", tc.name, worst)
		}
	}
}

// The log moment L(h) = ∫_0^h A ln(s)/sqrt(s) ds against its closed form for
// a sphere, A = pi(2 r s - s^2): ∫ s^p ln s = s^(p+1)(ln s/(p+1) - 1/(p+1)^2).
func TestLogMoment(t *testing.T) {
	r := 1.0
	ht, err := NewHeadTransform(&Tank{Shape: Sphere{DiameterM: 2 * r}})
	if err != nil {
		t.Fatal(err)
	}
	prim := func(h, p float64) float64 { return math.Pow(h, p+1) * (math.Log(h)/(p+1) - 1/((p+1)*(p+1))) }
	for _, h := range []float64{0.01, 0.2, 0.7, 1.3, 1.9} {
		want := math.Pi * (2*r*prim(h, 0.5) - prim(h, 1.5))
		if got := ht.logMoment(h); math.Abs(got-want) > 1e-7*math.Abs(want)+1e-9 {
			t.Errorf("L(%g): got %.12g, want %.12g", h, got, want)
		}
	}
	cyl, _ := NewHeadTransform(&Tank{Shape: Rectangular{LengthM: 1, WidthM: 1, InternalHeightM: 2}})
	if got, want := cyl.logMoment(1), -4.0; math.Abs(got-want) > 1e-12 {
		t.Errorf("rectangle L(1): got %g, want %g", got, want)
	}
}

// Torricelli's closed form for a constant-area tank:
// h(t) = (sqrt(h0) - K t/(2A))^2 (REFERENCES.md §3d, tag S2).
func TestDrainHeadTorricelli(t *testing.T) {
	tank := &Tank{ID: "c", Shape: VerticalCylinder{DiameterM: 1.5, InternalHeightM: 4}, DatumKnown: true}
	a := tank.AreaAtHeadM2(0)
	k, h0 := 2e-3, 3.0
	for _, ts := range []float64{0, 10, 100, 500, 1000, 1500} {
		u := math.Max(math.Sqrt(h0)-k*ts/(2*a), 0)
		want := u * u
		if got := DrainHeadM(tank, k, h0, ts); math.Abs(got-want) > 1e-12 {
			t.Errorf("t=%g: got %.15g, want %.15g", ts, got, want)
		}
	}
	if got := DrainHeadM(tank, k, h0, 1e6); got != 0 {
		t.Errorf("after empty: got %g, want 0", got)
	}
}

// DrainHeadM must follow the ODE A(h) dh/dt = -K sqrt(h) for every shape.
func TestDrainHeadFollowsODE(t *testing.T) {
	for name, s := range testShapes(t) {
		tank := &Tank{ID: name, Shape: s, OutletElevM: 0.05 * s.HeightM()}
		h0 := 0.9 * tank.DrainableHeightM()
		k := 1e-3
		tEmpty := DrainTimeS(tank, k, h0, 0)
		for _, frac := range []float64{0.1, 0.4, 0.7, 0.9} {
			ts := frac * tEmpty
			const dt = 1e-3
			h := DrainHeadM(tank, k, h0, ts)
			dh := (DrainHeadM(tank, k, h0, ts+dt) - DrainHeadM(tank, k, h0, ts-dt)) / (2 * dt)
			lhs := tank.AreaAtHeadM2(h) * dh
			rhs := -k * math.Sqrt(h)
			if math.Abs(lhs-rhs) > 1e-6*math.Abs(rhs) {
				t.Errorf("%s t=%g: A dh/dt = %g, -K sqrt(h) = %g", name, ts, lhs, rhs)
			}
		}
		if got := DrainHeadM(tank, k, h0, tEmpty*1.0001); got > 1e-6 {
			t.Errorf("%s: head after the drain time %g, want about 0", name, got)
		}
	}
}

// Drain times to empty (REFERENCES.md §3d, closed forms tag C, numeric values
// C computed with g = 9.80665; the 103.0 s cylinder case is also S2).
func TestDrainTimeReference(t *testing.T) {
	k := func(cd, a float64) float64 { return cd * a * math.Sqrt(2*StandardGravity) }
	tests := []struct {
		name string
		tank Tank
		k    float64
		h0   float64
		want float64
	}{
		{"cylinder A1 a0.01 Cd0.62", Tank{Shape: Rectangular{LengthM: 1, WidthM: 1, InternalHeightM: 3}}, k(0.62, 0.01), 2, 103.0097},
		{"cylinder A1 a1e-3 Cd0.6", Tank{Shape: VerticalCylinder{DiameterM: math.Sqrt(4 / math.Pi), InternalHeightM: 3}}, k(0.6, 1e-3), 2, 1064.4332},
		{"sphere full", Tank{Shape: Sphere{DiameterM: 2}}, k(0.6, 1e-3), 2, 1783.4749},
		{"sphere half", Tank{Shape: Sphere{DiameterM: 2}}, k(0.6, 1e-3), 1, 1103.4688},
		{"cone full", Tank{Shape: ConeBottomCylinder{DiameterM: 2, ConeHeightM: 2}}, k(0.6, 1e-3), 2, 668.8031},
		{"horizontal full", Tank{Shape: HorizontalCylinder{DiameterM: 2, LengthM: 2}}, k(0.6, 1e-3), 2, 2838.4885},
		{"horizontal half", Tank{Shape: HorizontalCylinder{DiameterM: 2, LengthM: 2}}, k(0.6, 1e-3), 1, 1834.9313},
	}
	for _, tc := range tests {
		got := DrainTimeS(&tc.tank, tc.k, tc.h0, 0)
		if math.Abs(got-tc.want) > 5e-5 {
			t.Errorf("%s: got %.6f s, want %.4f s", tc.name, got, tc.want)
		}
	}
	// The sqrt(h) slope of the second case, 1.328607e-3 m^0.5/s (§3d, C).
	if got, want := k(0.6, 1e-3)/2, 1.328607e-3; math.Abs(got-want) > 5e-10 {
		t.Errorf("sqrt(h) slope: got %g, want %g", got, want)
	}
}

func TestStandardGravity(t *testing.T) {
	// 3rd CGPM (1901): g_n = 980.665 cm/s^2 (REFERENCES.md §3b, tag S).
	if got, want := StandardGravity, 9.80665; got != want {
		t.Errorf("got %v, want %v", got, want)
	}
}

func TestGaussLegendreNodes(t *testing.T) {
	// The 6-point rule integrates x^k exactly up to k = 11.
	for k := 0; k <= 11; k++ {
		var s float64
		for i := range 6 {
			s += gl6w[i] * math.Pow(gl6x[i], float64(k))
		}
		want := 0.0
		if k%2 == 0 {
			want = 2 / float64(k+1)
		}
		if math.Abs(s-want) > 1e-15 {
			t.Errorf("x^%d: got %.17g, want %g", k, s, want)
		}
	}
}

func BenchmarkHeadTransform(b *testing.B) {
	ht, _ := NewHeadTransform(&Tank{Shape: Sphere{DiameterM: 3}})
	b.Run("F", func(b *testing.B) {
		x := 0.0
		for b.Loop() {
			x += ht.F(1.234)
		}
		_ = x
	})
	b.Run("Inv", func(b *testing.B) {
		x := 0.0
		f := ht.F(1.234)
		for b.Loop() {
			x += ht.Inv(f)
		}
		_ = x
	})
}

func TestInvSlope(t *testing.T) {
	ht, _ := NewHeadTransform(&Tank{Shape: Sphere{DiameterM: 2}})
	// dh/dF = sqrt(h)/A(h); at h = 1 for R = 1: 1/pi.
	if got, want := ht.invSlope(1), 1/math.Pi; math.Abs(got-want) > 1e-15 {
		t.Errorf("got %g, want %g", got, want)
	}
}
