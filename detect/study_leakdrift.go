package detect

import (
	"fmt"
	"math"
	"strings"

	"drainsight/model"
)

// Fault names of the leak-or-drift study (drift rows use FaultSensorDrift).
const (
	FaultLeakAbove = "tank_leak_above" // leak opening above the outlet, size mm/h at top fill
	FaultLeakBelow = "tank_leak_below" // leak opening below the outlet, size mm/h at top fill
)

// KindStudyRow is one row of the leak-or-drift study: the share of tanks
// with any finding within the horizon, the share of those whose first
// finding had the right kind (tank_leak for a leak, sensor_fault/drift for
// a drift), the median delay from the onset to the first finding, and the
// findings raised before the onset (the healthy tank's own false alarms;
// charts restarted after each).
type KindStudyRow struct {
	Fault            string
	Size             float64
	Unit             string
	Tanks            int
	DetectedPct      float64
	RightKindPct     float64
	MedianDelayHours float64
	FalseBeforeOnset int
}

// The leak-or-drift study's tank: a vertical cylinder of 2 m² filled to
// 3 m above the outlet, read every 30 s with 1 mm noise; the opening of a
// leak above the outlet is 0.5 m above it, of one below 0.3 m below it.
const (
	ldAreaM2     = 2.0
	ldTopM       = 3.0
	ldAboveM     = 0.5
	ldBelowM     = -0.3
	ldNoiseM     = 0.001
	ldSampleS    = 30.0
	ldHorizonDay = 30.0
)

// StudyLeakDrift simulates tank leaks and sensor drifts at the level the
// detector consumes and measures whether the first finding has the right
// kind. Rows: leaks of 5, 10, 20, 40, 80 mm/h at top fill through an
// opening above and below the outlet, and drifts of -40, -20, -10, -5, +5,
// +10, +20, +40 mm/day; StudyOptions.Tanks tanks per row (Seed, Tau,
// SERel, BaselineDays as in Study), 30 days watched after an onset
// BaselineDays + 0-30 days in.
//
// Each tank (outlet K as in Study, 1-3 drains a day) runs cycles: filled
// to the top, idle there for 0.5-2 h, drained to empty (70 %) or stopped at
// 30-70 % of the head, idle at that level until the next cycle. The level
// follows Torricelli's law for a leak through an opening at z (A dh/dt =
// -K_leak sqrt(h - z), closed form for the cylinder), below the outlet too
// for an opening there; a drift adds rate × time since the onset to every
// reading. Each idle period gives the fit model.FitIdle would give: the
// chord rate with the least-squares standard error of 1 mm noise at 30 s,
// the leak constant -rate A / sqrt(mean reading) (NaN when the readings
// reach within 3 mm of the outlet, as FitIdle's is at or below it). Each
// drain gives K = K_outlet exp(τ ε)(1 + SERel ε') plus the leak's share,
// K_leak × the mean of sqrt(h - z)/sqrt(h) over the drain's heads, and a
// complete drain its empty-tank reading (1 mm scatter plus the drift's
// offset; below-outlet leaks falling faster than 2 mm/h at the empty level
// leave no plateau, so those drains are not complete, as measured through
// the segmenter). The detector is evaluated after every idle period and
// every drain. Deterministic for a given Seed.
func StudyLeakDrift(opt StudyOptions) []KindStudyRow {
	opt = opt.withDefaults()
	var rows []KindStudyRow
	for ci, fault := range []string{FaultLeakAbove, FaultLeakBelow} {
		for si, mmh := range []float64{5, 10, 20, 40, 80} {
			rows = append(rows, leakDriftCell(opt, fault, mmh, "mm/h", uint64(6000+ci*10+si)))
		}
	}
	for si, mmd := range []float64{-40, -20, -10, -5, 5, 10, 20, 40} {
		rows = append(rows, leakDriftCell(opt, FaultSensorDrift, mmd, "mm/day", uint64(6100+si)))
	}
	return rows
}

// ldPlant is the true level of one study tank and its faults.
type ldPlant struct {
	onsetNs int64
	z       float64 // leak opening above the outlet, m
	kLeak   float64 // leak constant after the onset, m^2.5/s
	driftMs float64 // reading drift after the onset, m/s
	h       float64 // true head now, m
	bottomM float64 // vessel bottom, m above the outlet
}

// shut advances the true head over [t0, t1] with the outlet shut.
func (p *ldPlant) shut(t0, t1 int64) {
	a := max(t0, p.onsetNs)
	if p.kLeak == 0 || t1 <= a || p.h <= p.z {
		return
	}
	r := math.Sqrt(p.h-p.z) - p.kLeak*float64(t1-a)/1e9/(2*ldAreaM2)
	p.h = p.z + math.Max(r, 0)*math.Max(r, 0)
	p.h = math.Max(p.h, p.bottomM)
}

// offset is the drift's offset of the reading at t.
func (p *ldPlant) offset(t int64) float64 {
	if t <= p.onsetNs {
		return 0
	}
	return p.driftMs * float64(t-p.onsetNs) / 1e9
}

func leakDriftCell(opt StudyOptions, fault string, size float64, unit string, cell uint64) KindStudyRow {
	row := KindStudyRow{Fault: fault, Size: size, Unit: unit, Tanks: opt.Tanks}
	dopt := opt.Detector.withDefaults()
	var delays []float64
	detected, right := 0, 0
	for i := 0; i < opt.Tanks; i++ {
		st := newSimTank(opt.Seed, cell, uint64(i))
		r := st.rng
		p := &ldPlant{h: ldTopM, bottomM: -0.4, onsetNs: studyStart + int64((opt.BaselineDays+30*r.Float64())*nsPerDay)}
		switch fault {
		case FaultLeakAbove, FaultLeakBelow:
			p.z = ldAboveM
			if fault == FaultLeakBelow {
				p.z = ldBelowM
			}
			p.kLeak = size / 3.6e6 * ldAreaM2 / math.Sqrt(ldTopM-p.z)
		default:
			p.driftMs = size * 1e-3 / 86400
		}
		end := p.onsetNs + int64(ldHorizonDay*nsPerDay)
		s := NewState(fmt.Sprintf("sim-%d", i))
		done := false
		look := func(now int64) {
			fs := s.Evaluate(nsTime(now), dopt)
			if len(fs) == 0 {
				return
			}
			if now < p.onsetNs {
				row.FalseBeforeOnset++
				s.restartCharts()
				return
			}
			done = true
			detected++
			delays = append(delays, float64(now-p.onsetNs)/3600e9)
			f := fs[0]
			switch fault {
			case FaultSensorDrift:
				if f.Kind == KindSensorFault && f.Subtype == SubDrift {
					right++
				}
			default:
				if f.Kind == KindTankLeak {
					right++
				}
			}
		}
		idle := func(t0, t1 int64) {
			h0 := p.h
			p.shut(t0, t1)
			y0, y1 := h0+p.offset(t0), p.h+p.offset(t1)
			dur := float64(t1-t0) / 1e9
			n := int(dur / ldSampleS)
			rateSE := ldNoiseM / math.Sqrt(float64(n)*dur*dur/12)
			rate := (y1-y0)/dur + rateSE*r.NormFloat64()
			mean := 0.5 * (y0 + y1)
			f := model.IdleFit{Tank: s.Tank, StartNs: t0, EndNs: t1, N: n, MeanHeadM: mean, RateMs: rate, RateSEMs: rateSE,
				NoiseM: ldNoiseM, FlatRun: 2, LeakKM25s: math.NaN(), LeakKSEM25s: math.NaN()}
			if min(y0, y1) > 3*ldNoiseM {
				f.LeakKM25s = -rate * ldAreaM2 / math.Sqrt(mean)
				f.LeakKSEM25s = rateSE * ldAreaM2 / math.Sqrt(mean)
			}
			s.AddIdle(f, dopt)
			look(t1)
		}
		t := studyStart
		for t < end && !done {
			gap := int64((0.5 + r.Float64()) / st.ratePerDay * nsPerDay)
			// Fill to the top (instant at this scale), idle there.
			p.h = ldTopM
			top := t + int64((0.5+1.5*r.Float64())*3600e9)
			idle(t, top)
			if done {
				break
			}
			// Drain.
			k := st.k0 * math.Exp(opt.Tau*r.NormFloat64())
			complete := r.Float64() < 0.7
			hEnd := 0.0
			if !complete {
				hEnd = p.h * (0.3 + 0.4*r.Float64())
			}
			h0 := p.h
			span := 2 * ldAreaM2 * (math.Sqrt(h0) - math.Sqrt(hEnd)) / k
			dEnd := top + int64(span*1e9)
			if dEnd >= p.onsetNs && p.kLeak > 0 {
				var sum float64
				const nh = 16
				for j := range nh {
					v := math.Sqrt(hEnd) + (math.Sqrt(h0)-math.Sqrt(hEnd))*(float64(j)+0.5)/nh
					h := math.Max(v*v, 0.05)
					sum += math.Sqrt(math.Max(h-p.z, 0) / h)
				}
				k += p.kLeak * sum / nh
			}
			kObs := k * (1 + opt.SERel*r.NormFloat64())
			f := model.Fit{Tank: s.Tank, StartNs: top, EndNs: dEnd, N: int(span / ldSampleS), KM25s: kObs, KSEM25s: opt.SERel * kObs,
				Quality: model.QualityA, SigmaM: ldNoiseM, H0M: h0 + p.offset(top), H1M: hEnd + p.offset(dEnd), Exponent: 0.5, EmptyHeadM: math.NaN()}
			p.h = hEnd
			if complete {
				f.Complete = true
				f.EmptyHeadM = p.offset(dEnd) + ldNoiseM*r.NormFloat64()
				if dEnd >= p.onsetNs && p.kLeak > 0 && p.z < 0 {
					// Below the outlet the leak goes on: the plateau after the
					// drain falls at rate0; its median over a 15 min hold is
					// half that fall lower.
					rate0 := p.kLeak * math.Sqrt(-p.z) / ldAreaM2
					f.EmptyHeadM -= rate0 * 450
					if rate0*3.6e6 > 2 {
						f.Complete, f.EmptyHeadM = false, math.NaN()
					}
				}
			}
			s.AddFit(f, dopt)
			look(dEnd)
			if done {
				break
			}
			next := t + gap
			if next > dEnd+int64(600e9) {
				idle(dEnd+int64(60e9), next)
			}
			t = max(next, dEnd+int64(600e9))
		}
	}
	row.DetectedPct = 100 * float64(detected) / float64(opt.Tanks)
	if detected > 0 {
		row.RightKindPct = 100 * float64(right) / float64(detected)
	}
	row.MedianDelayHours = median(delays)
	return row
}

// FormatKindStudyTable renders the leak-or-drift study as a markdown table.
func FormatKindStudyTable(rows []KindStudyRow) string {
	var b strings.Builder
	b.WriteString("| fault | size | tanks | detected % | right kind at the first finding % | median delay (h) | false before onset |\n")
	b.WriteString("|---|---|---|---|---|---|---|\n")
	for _, r := range rows {
		fmt.Fprintf(&b, "| %s | %+g %s | %d | %.1f | %.1f | %s | %d |\n", r.Fault, r.Size, r.Unit, r.Tanks, r.DetectedPct, r.RightKindPct,
			fmtNum(r.MedianDelayHours), r.FalseBeforeOnset)
	}
	return b.String()
}
