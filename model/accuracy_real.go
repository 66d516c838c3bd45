package model

import (
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
)

// Disturbance is a way a real reading departs from the white-noise model of
// the accuracy study. Several may combine. The zero value is white noise.
type Disturbance struct {
	Name string
	// AR1Rho: the reading noise is a first-order autoregression with this
	// lag-1 autocorrelation per sample (its stationary σ is the row's
	// noise). 0: white.
	AR1Rho float64
	// LagS: the transmitter reads through a first-order lag with this time
	// constant (s), settled at the starting level when the valve opens
	// (the "damping" setting of most transmitters, or a stilling well).
	LagS float64
	// QuantumM: readings are rounded to counts of this size (m), on a grid
	// whose offset is random per drain; the row's noise is added before
	// rounding.
	QuantumM float64
	// ReynoldsCd: the discharge coefficient follows the Reynolds number
	// of the jet on the bench tank (see benchCd) instead of staying
	// constant; the truth is then the pseudo-true K, the fit of the
	// noise-free reading (see RealisticStudy).
	ReynoldsCd bool
}

// RealisticDisturbances are the rows of the realistic accuracy study: each
// departure alone at the ends of its usual range, then combined.
var RealisticDisturbances = []Disturbance{
	{Name: "AR(1) ρ 0.90", AR1Rho: 0.90},
	{Name: "AR(1) ρ 0.99", AR1Rho: 0.99},
	{Name: "sensor lag 5 s", LagS: 5},
	{Name: "sensor lag 60 s", LagS: 60},
	{Name: "counts 1 mm", QuantumM: 0.001},
	{Name: "counts 5 mm", QuantumM: 0.005},
	{Name: "Cd(Re)", ReynoldsCd: true},
	{Name: "AR(1) 0.95 + lag 20 s + counts 2 mm", AR1Rho: 0.95, LagS: 20, QuantumM: 0.002},
	{Name: "Cd(Re) + AR(1) 0.95 + counts 1 mm", ReynoldsCd: true, AR1Rho: 0.95, QuantumM: 0.001},
}

// Bench tank of the Reynolds rows: a 0.25 m vertical cylinder from 0.5 m
// through a 5 mm short-tube outlet (length 2 diameters), water at 20 °C
// (kinematic viscosity 1.004e-6 m^2/s, IAPWS-IF97 / handbook tables). The
// jet Reynolds number Re = d sqrt(2 g h)/ν runs from about 16 000 at the
// start down to 1 600 near empty, where the coefficient changes most.
const (
	benchDiamM     = 0.25
	benchH0M       = 0.5
	benchOutletM   = 0.005
	benchLOverD    = 2.0
	waterNu20M2s   = 1.004e-6
	benchMinHeadM  = 0.002
	benchStepMaxS  = 0.5
	realNoiseM     = 0.002
	realSampleS    = 10.0
	benchSampleS   = 5.0
	benchNoiseM    = 0.001
	realReplicates = 200
)

// benchCd is the discharge coefficient of a short tube at Reynolds number
// re by Lichtarowicz, Duggins & Markland (1965), "Discharge coefficients for
// incompressible non-cavitating flow through long orifices", J. Mech. Eng.
// Sci. 7(2): 1/Cd = 1/Cd_u + (20/Re)(1 + 2.25 l/d), with the ultimate
// coefficient Cd_u = 0.827 - 0.0085 l/d (same source, 2 <= l/d <= 10).
func benchCd(re float64) float64 {
	cdu := 0.827 - 0.0085*benchLOverD
	return 1 / (1/cdu + 20/re*(1+2.25*benchLOverD))
}

// benchTank returns the bench tank and its K at the ultimate coefficient.
func benchTank() (*Tank, float64) {
	a := 0.25 * math.Pi * benchOutletM * benchOutletM
	cdu := 0.827 - 0.0085*benchLOverD
	return &Tank{ID: "bench", Shape: VerticalCylinder{DiameterM: benchDiamM, InternalHeightM: 0.6}, DatumKnown: true,
		OutletDiamM: benchOutletM}, cdu * a * Sqrt2g
}

// cleanReading integrates the drain and the transmitter lag by
// fourth-order Runge-Kutta from h0 (reading settled at h0), and returns the
// noise-free reading at t = 0, dt, 2 dt, ... up to tEnd or until the tank is
// empty. The drain is integrated in the head transform, dF/dt = -K(h)
// (A(h) dh/dt = -K(h) sqrt(h) with dF/dh = A/sqrt(h)), which is smooth where
// dh/dt is not (a cone near its apex) and exact for a constant K; the lag is
// τ dy/dt = h - y. kOf gives K at a head.
func cleanReading(ht *HeadTransform, kOf func(h float64) float64, h0, dt, tEnd, lagS float64) []float64 {
	head := func(f float64) float64 {
		if f <= 0 {
			return 0
		}
		return ht.Inv(f)
	}
	deriv := func(f, y float64) (float64, float64) {
		h := head(f)
		df := 0.0
		if h > 0 {
			df = -kOf(h)
		}
		dy := 0.0
		if lagS > 0 {
			dy = (h - y) / lagS
		}
		return df, dy
	}
	step := math.Min(dt/8, benchStepMaxS)
	if lagS > 0 {
		step = math.Min(step, lagS/8)
	}
	sub := int(math.Ceil(dt / step))
	step = dt / float64(sub)
	f, y := ht.F(h0), h0
	var out []float64
	for i := 0; float64(i)*dt <= tEnd; i++ {
		h := head(f)
		if h <= benchMinHeadM {
			break
		}
		if lagS > 0 {
			out = append(out, y)
		} else {
			out = append(out, h)
		}
		for range sub {
			k1f, k1y := deriv(f, y)
			k2f, k2y := deriv(f+0.5*step*k1f, y+0.5*step*k1y)
			k3f, k3y := deriv(f+0.5*step*k2f, y+0.5*step*k2y)
			k4f, k4y := deriv(f+step*k3f, y+step*k3y)
			f += step / 6 * (k1f + 2*k2f + 2*k3f + k4f)
			y += step / 6 * (k1y + 2*k2y + 2*k3y + k4y)
		}
	}
	return out
}

// disturb writes one noisy drain into seg from the noise-free reading
// clean: AR(1) or white noise of stationary σ, then rounding to counts.
func disturb(seg *Segment, clean []float64, dt, sigma float64, dist Disturbance, rng *rand.Rand) {
	const base = int64(1_750_000_000) * 1e9
	seg.TimeNs, seg.HeadM = seg.TimeNs[:0], seg.HeadM[:0]
	rho := dist.AR1Rho
	innov := sigma * math.Sqrt(1-rho*rho)
	e := sigma * rng.NormFloat64()
	phase := rng.Float64() * dist.QuantumM
	for i, c := range clean {
		if i > 0 {
			e = rho*e + innov*rng.NormFloat64()
		}
		y := c + e
		if q := dist.QuantumM; q > 0 {
			y = q*math.Round((y+phase)/q) - phase
		}
		seg.TimeNs = append(seg.TimeNs, base+int64(math.Round(float64(i)*dt*1e9)))
		seg.HeadM = append(seg.HeadM, y)
	}
}

// RealisticOptions describes the realistic accuracy study. The zero value
// selects every default.
type RealisticOptions struct {
	Seed       uint64
	Replicates int           // per row; default 200
	Shapes     []string      // from AccuracyShapes; default vertical, horizontal and cone
	Drains     []string      // default partial and complete
	Rows       []Disturbance // default RealisticDisturbances
	Fit        FitOptions
}

// RealisticStudy fits simulated drains whose readings carry the
// disturbances of real transmitters and outlets (correlated noise, sensor
// lag, counts, a coefficient that varies with the Reynolds number) and
// reports for each how often the stated 95 % interval holds the truth and
// how many drains are graded usable (A or B). Noise 2 mm at 10 s sampling
// on the study tanks; 1 mm at 5 s on the bench tank of the Reynolds rows.
//
// The truth is the tank's K, except for rows with ReynoldsCd, where no
// single K is true: it is then the pseudo-true K, the fit of the same drain
// read without noise, which is what a run repeated without noise would
// give and so what repeat drains of the outlet scatter about.
func RealisticStudy(opt RealisticOptions) []AccuracyRow {
	if opt.Replicates <= 0 {
		opt.Replicates = realReplicates
	}
	if len(opt.Shapes) == 0 {
		opt.Shapes = []string{"vertical", "horizontal", "cone"}
	}
	if len(opt.Drains) == 0 {
		opt.Drains = []string{"partial", "complete"}
	}
	if len(opt.Rows) == 0 {
		opt.Rows = RealisticDisturbances
	}
	var rows []AccuracyRow
	var seg Segment
	cell := uint64(1 << 20)
	for _, dist := range opt.Rows {
		shapes := opt.Shapes
		if dist.ReynoldsCd {
			shapes = []string{"bench"}
		}
		for _, shape := range shapes {
			var tank *Tank
			var k, h0 float64
			sigma, dt := realNoiseM, realSampleS
			if shape == "bench" {
				tank, k = benchTank()
				h0, sigma, dt = benchH0M, benchNoiseM, benchSampleS
			} else {
				var err error
				if tank, k, h0, err = accuracyTank(shape); err != nil {
					continue
				}
			}
			if dist.LagS > 0 {
				// The transmitter's damping is configured (sensor.lag_s).
				t2 := *tank
				t2.SensorLagS = dist.LagS
				tank = &t2
			}
			ht, err := NewHeadTransform(tank)
			if err != nil {
				continue
			}
			kOf := func(float64) float64 { return k }
			if dist.ReynoldsCd {
				a := 0.25 * math.Pi * benchOutletM * benchOutletM
				kOf = func(h float64) float64 {
					re := benchOutletM * math.Sqrt(2*StandardGravity*h) / waterNu20M2s
					return benchCd(re) * a * Sqrt2g
				}
			}
			for _, kind := range opt.Drains {
				complete := kind == "complete"
				tEnd := ht.DrainTimeS(k, h0, h0/2)
				if complete {
					tEnd = ht.DrainTimeS(k, h0, 0) * 1.5 // the slower coefficient of the Reynolds rows needs longer
				}
				clean := cleanReading(ht, kOf, h0, dt, tEnd, dist.LagS)
				if !complete {
					// A partial drain ends at half the starting head.
					for i, c := range clean {
						if c < h0/2 {
							clean = clean[:i]
							break
						}
					}
				}
				truth := k
				if dist.ReynoldsCd {
					seg.TimeNs, seg.HeadM = seg.TimeNs[:0], seg.HeadM[:0]
					disturb(&seg, clean, dt, 0, Disturbance{}, rand.New(rand.NewPCG(0, 0)))
					seg.Tank, seg.Kind, seg.Complete, seg.EmptyHeadM = shape, Drain, complete, math.NaN()
					if complete {
						seg.EmptyHeadM = 0
					}
					f, err := FitDrain(tank, &seg, opt.Fit)
					if err != nil {
						continue
					}
					truth = f.KM25s
				}
				cell++
				rng := rand.New(rand.NewPCG(opt.Seed, cell))
				row := AccuracyRow{Shape: shape, Drain: kind, Disturbance: dist.Name, NoiseM: sigma, SampleS: dt,
					TrueKM25s: truth, CRBM25s: math.NaN(), Ratio: math.NaN()}
				var se2, sb float64
				covered, usable := 0, 0
				fits := make([]Fit, 0, opt.Replicates)
				for range opt.Replicates {
					disturb(&seg, clean, dt, sigma, dist, rng)
					seg.Tank, seg.Kind = shape, Drain
					seg.Complete, seg.EmptyHeadM = complete, math.NaN()
					if complete {
						seg.EmptyHeadM = sigma * rng.NormFloat64() / 4
					}
					f, err := FitDrain(tank, &seg, opt.Fit)
					if err != nil {
						row.Failed++
						continue
					}
					row.Fitted++
					fits = append(fits, f)
					e := f.KM25s - truth
					se2 += e * e
					sb += e
					if f.KLo95M25s <= truth && truth <= f.KHi95M25s {
						covered++
					}
					if f.Quality == QualityA || f.Quality == QualityB {
						usable++
					}
				}
				row.Samples = len(seg.TimeNs)
				if row.Fitted > 0 {
					row.RMSEM25s = math.Sqrt(se2 / float64(row.Fitted))
					row.RelBias = sb / float64(row.Fitted) / truth
					row.Coverage = float64(covered) / float64(row.Fitted)
					row.Usable = float64(usable) / float64(row.Fitted)
					row.InflowRejected = inflowRejected(fits)
				}
				rows = append(rows, row)
			}
		}
	}
	return rows
}

// inflowRejected is the share of fits that InflowSuspected rejects with a
// baseline made of the same fits: their median exponent and median ln K.
func inflowRejected(fits []Fit) float64 {
	ns, lk := make([]float64, 0, len(fits)), make([]float64, 0, len(fits))
	for _, f := range fits {
		if !math.IsNaN(f.Exponent) {
			ns = append(ns, f.Exponent)
		}
		lk = append(lk, math.Log(f.KM25s))
	}
	if len(ns) < 3 {
		return 0
	}
	c := ExponentCheckBaseline
	c.RefExponent, c.RefLnK = median(ns), median(lk)
	n := 0
	for i := range fits {
		if _, in := InflowSuspected(&fits[i], c); in {
			n++
		}
	}
	return float64(n) / float64(len(fits))
}

// FormatRealisticTable renders the rows of RealisticStudy as a markdown
// table followed by the coverage range and the usable share.
func FormatRealisticTable(rows []AccuracyRow) string {
	var b strings.Builder
	b.WriteString("| disturbance | shape | drain | noise mm | dt s | N | fitted | RMSE/K % | bias % | coverage % | usable % | taken for inflow % |\n")
	b.WriteString("|---|---|---|---:|---:|---:|---:|---:|---:|---:|---:|---:|\n")
	lo, hi := math.Inf(1), math.Inf(-1)
	var fitted, usable, inflow float64
	for _, r := range rows {
		fmt.Fprintf(&b, "| %s | %s | %s | %.1f | %g | %d | %d | %.3f | %+.3f | %.1f | %.1f | %.1f |\n",
			r.Disturbance, r.Shape, r.Drain, r.NoiseM*1e3, r.SampleS, r.Samples, r.Fitted,
			100*r.RMSEM25s/r.TrueKM25s, 100*r.RelBias, 100*r.Coverage, 100*r.Usable, 100*r.InflowRejected)
		inflow += r.InflowRejected * float64(r.Fitted)
		lo, hi = math.Min(lo, r.Coverage), math.Max(hi, r.Coverage)
		fitted += float64(r.Fitted)
		usable += r.Usable * float64(r.Fitted)
	}
	if len(rows) > 0 {
		fmt.Fprintf(&b, "\ncoverage %.1f-%.1f %% by row; usable (A or B) %.1f %% of fitted drains; taken for inflow %.2f %%\n", 100*lo, 100*hi, 100*usable/fitted, 100*inflow/fitted)
	}
	return b.String()
}
