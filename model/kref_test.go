package model

import (
	"math"
	"math/rand/v2"
	"testing"
)

// An outlet with q = K_n h^n, n = 0.55 and 0.65 (integrated in closed form:
// h^(1-n) falls linearly on a vertical cylinder), drained from the top to
// half (partial) and to near empty (full): the square-root K of the two
// differ by several per cent, K at one reference head agrees within the
// intervals.
func TestKAtReferenceAgreesAcrossDrains(t *testing.T) {
	tank := &Tank{ID: "x", Shape: VerticalCylinder{DiameterM: 2, InternalHeightM: 3}, DatumKnown: true}
	a := tank.AreaAtHeadM2(0)
	for _, n := range []float64{0.55, 0.65} {
		rng := rand.New(rand.NewPCG(4, uint64(100*n)))
		kn := 5e-3
		mk := func(h0, hEnd float64) Fit {
			seg := &Segment{Tank: "x", Kind: Drain, EmptyHeadM: math.NaN()}
			for i := 0; ; i++ {
				ts := float64(i) * 5
				v := math.Pow(h0, 1-n) - (1-n)*kn*ts/a
				h := math.Pow(v, 1/(1-n))
				if v <= 0 || h < hEnd {
					break
				}
				seg.TimeNs = append(seg.TimeNs, int64(ts*1e9))
				seg.HeadM = append(seg.HeadM, h+0.001*rng.NormFloat64())
			}
			f, err := FitDrain(tank, seg, FitOptions{})
			if err != nil {
				t.Fatal(err)
			}
			return f
		}
		part, full := mk(2.5, 1.25), mk(2.5, 0.05)
		nb, href := (part.Exponent+full.Exponent)/2, 1.0
		rp, rf := KAtReference(part, nb, href), KAtReference(full, nb, href)
		se := math.Hypot(part.KSEM25s, full.KSEM25s)
		t.Logf("n %.2f: exponents %.3f %.3f; sqrt-law K %.5g vs %.5g (%.1f %% apart); at h_ref K %.5g vs %.5g (%.2f %%, %.1f SE); true %.5g",
			n, part.Exponent, full.Exponent, part.KM25s, full.KM25s, 100*(part.KM25s/full.KM25s-1), rp, rf, 100*(rp/rf-1), math.Abs(rp-rf)/se, kn*math.Pow(href, n-0.5))
		if math.Abs(part.KM25s/full.KM25s-1) < 0.02 {
			t.Errorf("n %.2f: square-root K of partial and full drains only %.1f %% apart; the test needs them apart", n, 100*(part.KM25s/full.KM25s-1))
		}
		if math.Abs(rp-rf) > 2*se {
			t.Errorf("n %.2f: K at the reference head %.5g vs %.5g, %.1f SE apart, want within 2", n, rp, rf, math.Abs(rp-rf)/se)
		}
	}
}
