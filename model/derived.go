package model

import "math"

// Valve flow coefficients (IEC 60534-1 definitions):
//
//	Kv: m^3/h of water through the outlet at a pressure drop of 1 bar, rho0 = 1000 kg/m^3
//	Cv: US gal/min of water at a pressure drop of 1 psi
//
// A gravity outlet passes q = K sqrt(h) with a pressure drop dp = rho g h, so
// at dp0 = 1e5 Pa the head is h = dp0/(rho0 g) and Kv = 3600 K sqrt(dp0/(rho0 g)).
// Cv = Kv * sqrt(psi/bar) * (1000 L/m^3 / 60 min/h) / (3.785411784 L/gal) = 1.15608 Kv.
const (
	barPa       = 1e5
	psiPa       = 6894.757293168361 // 1 lbf/in^2 (exact from the definitions of lb, in and g_n)
	rho0KgM3    = 1000.0
	usGallonM3  = 3.785411784e-3 // exact, 231 in^3
	secondsHour = 3600.0
)

// KvFromK converts an outlet constant K (m^2.5/s) to the valve flow
// coefficient Kv (m^3/h at 1 bar, water of 1000 kg/m^3).
func KvFromK(kM25s float64) float64 {
	return secondsHour * kM25s * math.Sqrt(barPa/(rho0KgM3*StandardGravity))
}

// CvFromK converts an outlet constant K (m^2.5/s) to the valve flow
// coefficient Cv (US gal/min at 1 psi), about 1.156 Kv.
func CvFromK(kM25s float64) float64 {
	return 60 * kM25s * math.Sqrt(psiPa/(rho0KgM3*StandardGravity)) / usGallonM3
}

// CdAFromK returns the effective outlet area Cd*a = K/sqrt(2 g), m^2.
func CdAFromK(kM25s float64) float64 { return kM25s / Sqrt2g }

// CdFromK returns the discharge coefficient K / (a sqrt(2 g)) for an outlet
// of bore diameter outletDiamM (m); NaN when the bore is not positive.
func CdFromK(kM25s, outletDiamM float64) float64 {
	if !(outletDiamM > 0) {
		return math.NaN()
	}
	return kM25s / (0.25 * math.Pi * outletDiamM * outletDiamM * Sqrt2g)
}

// DrainTimeS returns the time (s) for a clean drain of tank t with outlet
// constant kM25s (m^2.5/s) from head h0M to head h1M (h1M <= 0 means empty):
//
//	t = ∫_{h1}^{h0} A(h) / (K sqrt(h)) dh = (F(h0) - F(h1)) / K
//
// It returns NaN for an invalid tank.
func DrainTimeS(t *Tank, kM25s, h0M, h1M float64) float64 {
	ht, err := TransformFor(t)
	if err != nil {
		return math.NaN()
	}
	return ht.DrainTimeS(kM25s, h0M, h1M)
}
