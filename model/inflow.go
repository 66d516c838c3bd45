package model

import (
	"fmt"
	"math"
)

// ExponentCheck is what the tank's own drains say about its outlet's
// exponent, for telling a drain from a fall with something still flowing
// in (see InflowSuspected). The zero value checks nothing.
type ExponentCheck struct {
	// RefExponent is the exponent n of q = K h^n that the tank's clean
	// drains show: the median of its baseline drains, or of its recent
	// drains before a baseline forms. 0: no reference, no check.
	RefExponent float64
	// AllowanceExp is the smallest excess over RefExponent that is
	// rejected, however precise the fit: how far one outlet's apparent
	// exponent moves between drains of different depth (a discharge
	// coefficient that follows the Reynolds number, the datum fit).
	AllowanceExp float64
	// ZLimit is the excess, in standard errors, beyond which it is not
	// scatter.
	ZLimit float64
	// With a baseline: its ln K, the between-drain scatter of ln K beyond
	// the fit error (TauLnK), and the exponent and head at which the
	// baseline compares K (KAtReference; 0: K as fitted). RefLnK 0: none.
	RefLnK, TauLnK float64
	KExponent      float64
	KHRefM         float64
}

// Exponent checks the tank's drains support. With a baseline the reference
// is the median of tens of drains of this outlet; before one forms it is the
// median of a few, and the allowance is wider.
var (
	ExponentCheckBaseline = ExponentCheck{AllowanceExp: 0.02, ZLimit: 6}
	ExponentCheckRecent   = ExponentCheck{AllowanceExp: 0.04, ZLimit: 6}
)

// exponentScatterTau is the spread of one outlet's fitted exponent between
// clean drains that the fit's own standard error does not hold: 0.005,
// the spread of the noise-free exponent of the Reynolds-number bench tank
// of the realistic accuracy study (Lichtarowicz et al. 1965 coefficient)
// between its partial and complete drains.
const exponentScatterTau = 0.005

// InflowSuspected reports whether a fitted drain shows the curvature of a
// fall with unmetered inflow (a pump still running, an upstream tank
// without a configured link) rather than of the tank's outlet alone, and
// why in plain words.
//
// With a constant inflow q the head transform falls at dF/dt = -K + q/√h
// instead of -K (F as in HeadTransform): the net outflow K√h - q falls off
// faster than √h as the head drops, and its local exponent
// d ln(K√h - q)/d ln h = (1/2)/(1 - q/(K√h)) exceeds 1/2 everywhere. An
// inflow of 5 % of the outlet flow at the start raises the apparent
// exponent of a drain to half its starting head by about 0.03, one of 20 %
// by about 0.15 (measured: TestInflowSuspected, TestScanPumpedFalls). Nothing else lifts a
// turbulent outlet's exponent above its own drains': a restriction or an
// eroded outlet changes K, not the exponent; a leak, a drift or a
// downstream tank lowers it. So a drain is rejected when its exponent
// exceeds the reference by more than the allowance and by more than ZLimit
// standard errors, the fit's serial-corrected one combined with the
// between-drain scatter exponentScatterTau.
//
// With a baseline, the same inflow also lowers K: K√h - q fitted as
// K' h^n' gives ln K' - ln K of about -2 (n' - 1/2) over the usual drain
// depths (-6 % with the 0.03 above). A short or shallow fall measures
// its exponent too loosely for ZLimit, but its K says more: a drain whose
// K lies more than kDropZ standard errors (fit and between-drain scatter
// combined) below the baseline while its exponent lies more than
// kDropExpZ above the reference is rejected too. A restriction lowers K
// with the exponent unchanged, so at worst a restricted outlet loses one
// drain in 1/P(z > kDropExpZ) ≈ 44 to this test; the drains after it still
// show the restriction.
func InflowSuspected(f *Fit, c ExponentCheck) (string, bool) {
	if !(c.RefExponent > 0) || math.IsNaN(f.Exponent) || !(f.ExponentSE > 0) {
		return "", false
	}
	ex := f.Exponent - c.RefExponent
	se := math.Hypot(f.ExponentSE, exponentScatterTau)
	if ex <= c.AllowanceExp {
		return "", false
	}
	if ex > c.ZLimit*se {
		return fmt.Sprintf("falls off faster than this outlet's drains: exponent %.3f ± %.3f against %.3f, %.1f standard errors above; something flowed in while it drained",
			f.Exponent, f.ExponentSE, c.RefExponent, ex/se), true
	}
	if c.RefLnK == 0 || ex <= kDropExpZ*se || !(f.KM25s > 0) {
		return "", false
	}
	k := f.KM25s
	if c.KExponent != 0 {
		if kr := KAtReference(*f, c.KExponent, c.KHRefM); kr > 0 && !math.IsInf(kr, 0) {
			k = kr
		}
	}
	d := math.Log(k) - c.RefLnK
	sd := math.Hypot(f.KSEM25s/f.KM25s, c.TauLnK)
	if !(sd > 0) || d >= -kDropZ*sd {
		return "", false
	}
	return fmt.Sprintf("falls off faster than this outlet's drains with K %.1f %% below its baseline: exponent %.3f ± %.3f against %.3f; something flowed in while it drained",
		100*(math.Exp(d)-1), f.Exponent, f.ExponentSE, c.RefExponent), true
}

// Thresholds of the K-drop test of InflowSuspected: the K deficit in
// standard errors and the exponent excess that must come with it.
const (
	kDropZ    = 3.0
	kDropExpZ = 2.0
)

// Reject records that a drain emitted by this Segmenter (whose fall has
// not yet been taken with TakeFalls) failed a later check: its fall's
// outcome becomes why and the counts move from Drains to that reason.
// It reports whether the fall was found.
func (s *Segmenter) Reject(g *Segment, why FallOutcome) bool {
	for i := len(s.falls) - 1; i >= 0; i-- {
		f := &s.falls[i]
		if f.StartNs != g.RawStartNs || f.Outcome != FallDrain {
			continue
		}
		f.Outcome = why
		s.stats.Drains--
		s.countReject(why)
		return true
	}
	return false
}
