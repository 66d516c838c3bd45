package model

import (
	"math"
	"math/rand/v2"
	"sort"
	"testing"
)

// TestInvStartInterval checks that the bucket index of Inv picks the same
// interval as a bisection of the node values (so Inv is unchanged by it),
// on tabulated shapes with and without zero-area stretches.
func TestInvStartInterval(t *testing.T) {
	st, err := NewStrappingTable([]float64{0, 0.5, 1, 2, 3}, []float64{0, 0, 1, 3, 5})
	if err != nil {
		t.Fatal(err)
	}
	tanks := []*Tank{
		{ID: "sphere", Shape: Sphere{DiameterM: 3}},
		{ID: "horizontal", Shape: HorizontalCylinder{DiameterM: 2, LengthM: 4}, OutletElevM: 0.1},
		{ID: "cone", Shape: ConeBottomCylinder{DiameterM: 2, CylinderHeightM: 2, ConeHeightM: 1}},
		{ID: "strapping-flat-start", Shape: st},
	}
	rng := rand.New(rand.NewPCG(21, 22))
	for _, tk := range tanks {
		ht, err := NewHeadTransform(tk)
		if err != nil {
			t.Fatalf("%s: %v", tk.ID, err)
		}
		n := len(ht.poly)
		fs := []float64{ht.fNode[1], ht.fNode[n/2], ht.fNode[n-1], math.Nextafter(ht.fTop, 0)}
		for range 20000 {
			fs = append(fs, rng.Float64()*ht.fTop)
		}
		for _, f := range fs {
			if !(f > 0) || f >= ht.fTop {
				continue
			}
			want := sort.Search(n, func(j int) bool { return ht.fNode[j] > f }) - 1
			_, got := ht.inv(f, -1)
			if got != want {
				t.Fatalf("%s: f = %.17g: interval got %d, want %d", tk.ID, f, got, want)
			}
		}
	}
}
