package model

import (
	"math"
	"strings"
	"testing"
)

func testShapes(t *testing.T) map[string]Shape {
	t.Helper()
	st, err := NewStrappingTable(
		[]float64{0, 0.25, 0.5, 1, 1.5, 2, 3},
		[]float64{0, 0.1, 0.35, 1.2, 2.3, 3.5, 6.0})
	if err != nil {
		t.Fatal(err)
	}
	return map[string]Shape{
		"vertical":   VerticalCylinder{DiameterM: 2, InternalHeightM: 3},
		"rect":       Rectangular{LengthM: 2, WidthM: 1.5, InternalHeightM: 2.5},
		"horizontal": HorizontalCylinder{DiameterM: 2, LengthM: 3},
		"sphere":     Sphere{DiameterM: 3},
		"cone":       ConeBottomCylinder{DiameterM: 2, CylinderHeightM: 2, ConeHeightM: 1},
		"strapping":  st,
	}
}

// The partial-fill volumes are the standard formulas (Perry's handbook,
// tank-volume section, from memory); the check values are computed
// independently (REFERENCES.md §3e, tag C).
func TestPartialVolumes(t *testing.T) {
	tests := []struct {
		name  string
		shape Shape
		level float64
		want  float64
	}{
		{"horizontal R1 L1 h0.5", HorizontalCylinder{DiameterM: 2, LengthM: 1}, 0.5, 0.6141848},
		{"horizontal R1 L1 h1", HorizontalCylinder{DiameterM: 2, LengthM: 1}, 1, 1.5707963},
		{"horizontal R1 L1 h1.5", HorizontalCylinder{DiameterM: 2, LengthM: 1}, 1.5, 2.5274078},
		{"sphere R1 h0.5", Sphere{DiameterM: 2}, 0.5, 0.6544985},
		{"sphere R1 h1", Sphere{DiameterM: 2}, 1, 2.0943951},
		{"sphere R1 h2", Sphere{DiameterM: 2}, 2, 4.1887902},
		// V = pi tan^2(theta) h^3 / 3 (REFERENCES.md §3e, M), tan(theta) = 1/2 here.
		{"cone R1 Hc2 h1", ConeBottomCylinder{DiameterM: 2, ConeHeightM: 2}, 1, math.Pi * 0.25 / 3},
	}
	for _, tc := range tests {
		got := tc.shape.VolumeM3(tc.level)
		if math.Abs(got-tc.want) > 5e-8 {
			t.Errorf("%s: got %.9f, want %.7f", tc.name, got, tc.want)
		}
	}
}

// AreaM2 must be the derivative of VolumeM3 and both must clamp.
func TestShapeAreaIsVolumeDerivative(t *testing.T) {
	for name, s := range testShapes(t) {
		h := s.HeightM()
		for i := 1; i < 200; i++ {
			l := h * float64(i) / 200
			const e = 1e-6
			num := (s.VolumeM3(l+e) - s.VolumeM3(l-e)) / (2 * e)
			a := s.AreaM2(l)
			if math.Abs(num-a) > 1e-5*math.Max(1, a) {
				t.Errorf("%s: level %g: dV/dh %g, area %g", name, l, num, a)
			}
			if a < 0 {
				t.Errorf("%s: negative area %g at %g", name, a, l)
			}
		}
		if got, want := s.VolumeM3(h+1), s.VolumeM3(h); got != want {
			t.Errorf("%s: volume above the top: got %g, want %g", name, got, want)
		}
		if got := s.VolumeM3(-1); got != s.VolumeM3(0) {
			t.Errorf("%s: volume below the bottom: got %g, want %g", name, got, s.VolumeM3(0))
		}
	}
}

func TestStrappingTableFollowsSphere(t *testing.T) {
	sp := Sphere{DiameterM: 2}
	var lv, vol []float64
	for i := 0; i <= 80; i++ {
		l := 2 * float64(i) / 80
		lv = append(lv, l)
		vol = append(vol, sp.VolumeM3(l))
	}
	st, err := NewStrappingTable(lv, vol)
	if err != nil {
		t.Fatal(err)
	}
	for i := range 199 {
		l := 0.01 * float64(i+1)
		if got, want := st.VolumeM3(l), sp.VolumeM3(l); math.Abs(got-want) > 1.5e-4 {
			t.Errorf("volume at %g: got %g, want %g", l, got, want)
		}
		if got, want := st.AreaM2(l), sp.AreaM2(l); math.Abs(got-want) > 0.03 {
			t.Errorf("area at %g: got %g, want %g", l, got, want)
		}
	}
	// Knots are reproduced exactly.
	for i, l := range lv {
		if got := st.VolumeM3(l); math.Abs(got-vol[i]) > 1e-12 {
			t.Errorf("knot %d: got %g, want %g", i, got, vol[i])
		}
	}
}

func TestStrappingTableMonotone(t *testing.T) {
	// A step in the data: PCHIP must not overshoot.
	st, err := NewStrappingTable([]float64{0, 1, 2, 3, 4}, []float64{0, 0, 5, 5, 6})
	if err != nil {
		t.Fatal(err)
	}
	prev := -1.0
	for i := 0; i <= 400; i++ {
		l := 4 * float64(i) / 400
		v := st.VolumeM3(l)
		if v < prev-1e-12 {
			t.Fatalf("volume falls at %g: %g after %g", l, v, prev)
		}
		if a := st.AreaM2(l); a < 0 {
			t.Fatalf("negative area %g at %g", a, l)
		}
		prev = v
	}
}

func TestStrappingTableErrors(t *testing.T) {
	tests := []struct {
		name    string
		l, v    []float64
		wantSub string
	}{
		{"length", []float64{0, 1}, []float64{0}, "2 levels but 1 volumes"},
		{"one point", []float64{0}, []float64{0}, "need at least 2"},
		{"start", []float64{0.1, 1}, []float64{0, 1}, "point 0"},
		{"not increasing", []float64{0, 1, 1}, []float64{0, 1, 2}, "point 2: level"},
		{"volume falls", []float64{0, 1, 2, 3}, []float64{0, 1, 0.5, 2}, "point 2: volume"},
		{"negative", []float64{0, 1}, []float64{-1, 1}, "point 0: volume -1"},
		{"nan level", []float64{0, math.NaN()}, []float64{0, 1}, "point 1: level NaN"},
		{"inf volume", []float64{0, 1}, []float64{0, math.Inf(1)}, "point 1: volume +Inf"},
		{"flat", []float64{0, 1}, []float64{2, 2}, "point 1: volume 2"},
	}
	for _, tc := range tests {
		_, err := NewStrappingTable(tc.l, tc.v)
		if err == nil || !strings.Contains(err.Error(), tc.wantSub) || !strings.HasPrefix(err.Error(), "model: ") {
			t.Errorf("%s: got error %v, want one containing %q", tc.name, err, tc.wantSub)
		}
	}
}

func TestTankValidate(t *testing.T) {
	tests := []struct {
		name string
		tank Tank
		ok   bool
	}{
		{"good", Tank{ID: "t1", Shape: Sphere{DiameterM: 2}, OutletElevM: 0.1}, true},
		{"no shape", Tank{ID: "t1"}, false},
		{"bad sphere", Tank{ID: "t1", Shape: Sphere{}}, false},
		{"outlet at top", Tank{ID: "t1", Shape: Sphere{DiameterM: 2}, OutletElevM: 2}, false},
		{"negative outlet", Tank{ID: "t1", Shape: Sphere{DiameterM: 2}, OutletElevM: -0.1}, false},
		{"bad bore", Tank{ID: "t1", Shape: Sphere{DiameterM: 2}, OutletDiamM: math.NaN()}, false},
		{"bad cone", Tank{ID: "t1", Shape: ConeBottomCylinder{DiameterM: 1, ConeHeightM: 1, CylinderHeightM: -1}}, false},
	}
	for _, tc := range tests {
		err := tc.tank.Validate()
		if (err == nil) != tc.ok {
			t.Errorf("%s: got %v, want ok=%v", tc.name, err, tc.ok)
		}
		if err != nil && !strings.Contains(err.Error(), `tank "t1"`) {
			t.Errorf("%s: error %q does not name the tank", tc.name, err)
		}
	}
}
