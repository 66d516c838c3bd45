package model

import (
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
)

// AccuracyOptions describes an accuracy study of FitDrain on simulated
// drains. The zero value selects every default.
type AccuracyOptions struct {
	// Seed makes the study reproducible. Default 0 (a fixed stream).
	Seed uint64
	// Replicates is the number of simulated drains per cell. Default 200.
	Replicates int
	// Shapes names the tanks to use, from AccuracyShapes. Default all.
	Shapes []string
	// NoiseM lists the reading noise σ (m). Default 0.5, 2 and 5 mm.
	NoiseM []float64
	// SampleS lists the sampling intervals (s). Default 1, 10 and 60 s.
	SampleS []float64
	// Drains lists "partial" (h0 down to h0/2) and/or "complete" (h0 down to
	// empty). Default both.
	Drains []string
	// DatumUnknown fits every drain with an unknown datum, the readings
	// being offset by 3 cm. Default false (datum known, no offset).
	DatumUnknown bool
	// Fit is passed to FitDrain.
	Fit FitOptions
}

// AccuracyShapes are the tanks of the accuracy study, each with the outlet
// constant of a 50 mm sharp-edged outlet (Cd 0.61, common practice) and a
// starting head near the top.
var AccuracyShapes = []string{"vertical", "rectangular", "horizontal", "sphere", "cone", "strapping"}

// AccuracyRow is one cell of an accuracy study.
//
// RMSE is the root mean square error of the fitted K over the drains that
// fitted; CRB is sqrt of the Cramér-Rao bound for K from the Fisher
// information of the level model, I = JᵀJ/σ^2 with the sensitivities
// ∂h/∂F0, ∂h/∂K (and ∂y/∂d when the datum is unknown) at the true values;
// Ratio = RMSE/CRB (1 is efficient); RelBias = mean(K̂ - K)/K; Coverage is the
// fraction of stated 95 % intervals that contain the true K.
type AccuracyRow struct {
	Shape        string
	Drain        string
	DatumUnknown bool
	NoiseM       float64
	SampleS      float64
	Samples      int // per drain
	Fitted       int // drains that fitted
	Failed       int // drains FitDrain rejected with an error
	TrueKM25s    float64
	RMSEM25s     float64
	CRBM25s      float64
	Ratio        float64
	RelBias      float64
	Coverage     float64
	Disturbance  string  // RealisticStudy rows: what departs from white noise
	Usable       float64 // RealisticStudy rows: share of fitted drains graded A or B
	// RealisticStudy rows: share of fitted drains InflowSuspected takes for
	// falls with inflow, checked against the row's own median exponent and
	// ln K as a baseline of this outlet would give them.
	InflowRejected float64
}

// accuracyTank returns the study tank for a shape name, its true K and the
// starting head.
func accuracyTank(name string) (*Tank, float64, float64, error) {
	k := 0.61 * 0.25 * math.Pi * 0.05 * 0.05 * Sqrt2g
	var s Shape
	elev, h0 := 0.0, 0.0
	switch name {
	case "vertical":
		s, h0 = VerticalCylinder{DiameterM: 2, InternalHeightM: 3}, 2.5
	case "rectangular":
		s, h0 = Rectangular{LengthM: 2, WidthM: 1.5, InternalHeightM: 2.5}, 2.2
	case "horizontal":
		s, h0 = HorizontalCylinder{DiameterM: 2, LengthM: 4}, 1.8
	case "sphere":
		s, h0 = Sphere{DiameterM: 3}, 2.7
	case "cone":
		s, h0 = ConeBottomCylinder{DiameterM: 2, CylinderHeightM: 2, ConeHeightM: 1}, 2.8
	case "strapping":
		// A dished-bottom tank described by points (invented).
		st, err := NewStrappingTable(
			[]float64{0, 0.1, 0.2, 0.3, 0.5, 1, 1.5, 2, 2.5, 3},
			[]float64{0, 0.05, 0.19, 0.40, 0.95, 2.45, 3.95, 5.45, 6.95, 8.45})
		if err != nil {
			return nil, 0, 0, err
		}
		s, elev, h0 = st, 0.1, 2.7
	default:
		return nil, 0, 0, fmt.Errorf("model: accuracy study: unknown shape %q", name)
	}
	return &Tank{ID: name, Shape: s, OutletElevM: elev, DatumKnown: true}, k, h0, nil
}

// simulateDrain fills seg with a clean drain from h0 sampled every dt
// seconds until tEnd, plus Gaussian noise σ and a datum offset d. Samples
// after the tank is empty are not produced.
func simulateDrain(seg *Segment, ht *HeadTransform, k, h0, dt, tEnd, sigma, d float64, rng *rand.Rand) {
	const base = int64(1_750_000_000) * 1e9
	seg.TimeNs, seg.HeadM = seg.TimeNs[:0], seg.HeadM[:0]
	f0 := ht.F(h0)
	for i := 0; ; i++ {
		t := float64(i) * dt
		if t > tEnd {
			break
		}
		f := f0 - k*t
		if !(f > 0) {
			break
		}
		seg.TimeNs = append(seg.TimeNs, base+int64(math.Round(t*1e9)))
		seg.HeadM = append(seg.HeadM, ht.Inv(f)+d+sigma*rng.NormFloat64())
	}
}

// crbK returns sqrt of the Cramér-Rao bound of K for a drain sampled at
// tau (s) with noise sigma.
func crbK(ht *HeadTransform, k, h0, sigma float64, tau []float64, datum bool) float64 {
	f0 := ht.F(h0)
	np := 2
	if datum {
		np = 3
	}
	var a [9]float64
	hint := -1
	for _, t := range tau {
		var g float64
		_, g, hint = ht.invG(f0-k*t, hint)
		col := [3]float64{g, -t * g, 1}
		for i := range np {
			for j := range np {
				a[i*np+j] += col[i] * col[j]
			}
		}
	}
	inv, ok := invSmall(a[:np*np], np)
	if !ok {
		return math.NaN()
	}
	return sigma * math.Sqrt(inv[np+1])
}

// AccuracyStudy simulates drains of every requested shape, noise level,
// sampling interval and drain kind, fits each with FitDrain and compares the
// spread of K with the Cramér-Rao bound. It is deterministic for a given
// Seed. Rows come in the order shape, drain kind, noise, sampling.
func AccuracyStudy(opt AccuracyOptions) []AccuracyRow {
	if opt.Replicates <= 0 {
		opt.Replicates = 200
	}
	if len(opt.Shapes) == 0 {
		opt.Shapes = AccuracyShapes
	}
	if len(opt.NoiseM) == 0 {
		opt.NoiseM = []float64{0.0005, 0.002, 0.005}
	}
	if len(opt.SampleS) == 0 {
		opt.SampleS = []float64{1, 10, 60}
	}
	if len(opt.Drains) == 0 {
		opt.Drains = []string{"partial", "complete"}
	}
	var rows []AccuracyRow
	var seg Segment
	tau := []float64{}
	cell := uint64(0)
	for _, shape := range opt.Shapes {
		tank, k, h0, err := accuracyTank(shape)
		if err != nil {
			continue
		}
		ht, err := NewHeadTransform(tank)
		if err != nil {
			continue
		}
		offset := 0.0
		if opt.DatumUnknown {
			t2 := *tank
			t2.DatumKnown = false
			tank = &t2
			offset = 0.03
		}
		for _, kind := range opt.Drains {
			tEnd := ht.DrainTimeS(k, h0, h0/2)
			complete := kind == "complete"
			if complete {
				tEnd = ht.DrainTimeS(k, h0, 0)
			}
			for _, sigma := range opt.NoiseM {
				for _, dt := range opt.SampleS {
					cell++
					rng := rand.New(rand.NewPCG(opt.Seed, cell))
					row := AccuracyRow{Shape: shape, Drain: kind, DatumUnknown: opt.DatumUnknown,
						NoiseM: sigma, SampleS: dt, TrueKM25s: k}
					var se2, sb float64
					covered := 0
					for range opt.Replicates {
						simulateDrain(&seg, ht, k, h0, dt, tEnd, sigma, offset, rng)
						seg.Tank, seg.Kind = shape, Drain
						seg.Complete, seg.EmptyHeadM = complete, math.NaN()
						if complete {
							seg.EmptyHeadM = offset + sigma*rng.NormFloat64()/4
						}
						f, err := FitDrain(tank, &seg, opt.Fit)
						if err != nil {
							row.Failed++
							continue
						}
						row.Fitted++
						e := f.KM25s - k
						se2 += e * e
						sb += e
						if f.KLo95M25s <= k && k <= f.KHi95M25s {
							covered++
						}
					}
					row.Samples = len(seg.TimeNs)
					tau = tau[:0]
					for _, tn := range seg.TimeNs {
						tau = append(tau, float64(tn-seg.TimeNs[0])*1e-9)
					}
					row.CRBM25s = crbK(ht, k, h0, sigma, tau, opt.DatumUnknown)
					if row.Fitted > 0 {
						row.RMSEM25s = math.Sqrt(se2 / float64(row.Fitted))
						row.RelBias = sb / float64(row.Fitted) / k
						row.Coverage = float64(covered) / float64(row.Fitted)
					}
					row.Ratio = row.RMSEM25s / row.CRBM25s
					rows = append(rows, row)
				}
			}
		}
	}
	return rows
}

// AccuracySummary condenses a study: the median and 90th percentile of
// RMSE/CRB, the largest |relative bias|, the mean coverage and the number of
// failed fits.
type AccuracySummary struct {
	MedianRatio   float64
	P90Ratio      float64
	MaxAbsRelBias float64
	MeanCoverage  float64
	Failed        int
}

// SummarizeAccuracy computes the summary of rows (quantiles by linear
// interpolation between order statistics, type 7).
func SummarizeAccuracy(rows []AccuracyRow) AccuracySummary {
	var s AccuracySummary
	var ratios []float64
	for _, r := range rows {
		if !math.IsNaN(r.Ratio) {
			ratios = append(ratios, r.Ratio)
		}
		s.MaxAbsRelBias = math.Max(s.MaxAbsRelBias, math.Abs(r.RelBias))
		s.MeanCoverage += r.Coverage / float64(len(rows))
		s.Failed += r.Failed
	}
	slices.Sort(ratios)
	s.MedianRatio = quantile7(ratios, 0.5)
	s.P90Ratio = quantile7(ratios, 0.9)
	return s
}

func quantile7(sorted []float64, p float64) float64 {
	if len(sorted) == 0 {
		return math.NaN()
	}
	h := p * float64(len(sorted)-1)
	lo := int(math.Floor(h))
	if lo >= len(sorted)-1 {
		return sorted[len(sorted)-1]
	}
	return sorted[lo] + (h-float64(lo))*(sorted[lo+1]-sorted[lo])
}

// FormatAccuracyTable renders rows as a markdown table followed by the
// summary line.
func FormatAccuracyTable(rows []AccuracyRow) string {
	var b strings.Builder
	b.WriteString("| shape | drain | datum | noise mm | dt s | N | fitted | RMSE/K % | CRB/K % | RMSE/CRB | bias % | coverage % |\n")
	b.WriteString("|---|---|---|---:|---:|---:|---:|---:|---:|---:|---:|---:|\n")
	for _, r := range rows {
		datum := "known"
		if r.DatumUnknown {
			datum = "fitted"
		}
		fmt.Fprintf(&b, "| %s | %s | %s | %.1f | %g | %d | %d | %.3f | %.3f | %.3f | %+.3f | %.1f |\n",
			r.Shape, r.Drain, datum, r.NoiseM*1e3, r.SampleS, r.Samples, r.Fitted,
			100*r.RMSEM25s/r.TrueKM25s, 100*r.CRBM25s/r.TrueKM25s, r.Ratio, 100*r.RelBias, 100*r.Coverage)
	}
	s := SummarizeAccuracy(rows)
	fmt.Fprintf(&b, "\nRMSE/CRB median %.3f, 90th percentile %.3f; largest |bias| %.3f %%; mean coverage %.1f %%; failed fits %d\n",
		s.MedianRatio, s.P90Ratio, 100*s.MaxAbsRelBias, 100*s.MeanCoverage, s.Failed)
	return b.String()
}
