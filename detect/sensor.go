package detect

import (
	"fmt"
	"math"
	"time"
)

// StuckRun is a finished run of bit-identical readings that met the stuck
// rule when it ended: first and last sample times and the sample count.
type StuckRun struct {
	StartNs int64 `json:"start_ns"`
	EndNs   int64 `json:"end_ns"`
	N       int   `json:"n"`
}

// Stuck rule constants (see stuckRule).
const (
	stuckFloorSamples = 30               // identical readings needed when healthy readings never repeat
	quantumFloorM     = 1e-9             // steps below 1 nm are unit-conversion rounding, not resolution
	stuckMemory       = 24 * time.Hour   // a recovered stuck period stays a finding this long
	maxStuckRuns      = 50               // stuck runs kept
	stuckMinDuration  = 30 * time.Minute // default Options.StuckMin
)

// stuckLimit is the stuck rule of one sensor at one time.
type stuckLimit struct {
	known   bool    // a noise estimate exists; otherwise the fixed StuckAfter rule applies
	never   bool    // noise below the quantum: legitimate repeats, never flagged by the run rule
	sigmaM  float64 // robust noise of the healthy sensor
	quantM  float64 // reading quantum (0: continuous)
	pSame   float64 // chance that two healthy consecutive readings are identical
	samples int     // identical readings that signal
	minDur  time.Duration
}

// pSameReading bounds the chance that a healthy reading repeats. Readings
// of a constant level with independent N(0, σ²) noise, rounded to a grid of
// step q, fall in grid cell j with chance P_j, so k consecutive readings
// are identical with chance Σ_j P_j^k <= (max_j P_j)^(k-1); the largest
// cell chance is that of the cell centred on the level,
//
//	p = P(|N(0, σ²)| < q/2) = 2Φ(q/(2σ)) - 1   (≈ q / (σ √(2π)) for q << σ),
//
// whatever the level's offset on the grid and whether or not it moves (a
// moving level only spreads the readings), so p^(k-1) bounds the chance of
// a healthy run of k. It is 0 for a continuous reading (q = 0). (Averaged
// over a random offset the pair chance is smaller, about q/(2σ√π), but a
// tank held at one level for hours does not average over offsets, and a
// simulation at the cell centre exceeded that rate.)
func pSameReading(sigma, q float64) float64 {
	if q <= 0 {
		return 0
	}
	if sigma <= 0 {
		return 1
	}
	return math.Min(1, math.Max(0, 2*stdNormCDF(q/(2*sigma))-1))
}

// stuckRule derives the stuck rule from the sensor's own noise and
// quantum. σ is the median noise (NoiseM) of the first BaselineDrains idle
// records since the sensor epoch (the drain fits' SigmaM when there are
// fewer than 3 idle records), q the smallest non-zero step between
// consecutive readings seen (QuantumM). Under healthy noise k consecutive
// readings are bit-identical with chance at most p^(k-1),
// p = pSameReading(σ, q); the rule signals at
//
//	k = max(30, 1 + ceil(ln α / ln p))  identical readings, lasting at least StuckMin,
//
// with α the per-evaluation sensor alpha, so a healthy sensor is called
// stuck with chance at most α per evaluation (the level moves during drains,
// which only lowers it). When q = 0 (continuous readings) p = 0 and the floor
// of 30 identical readings applies: a healthy continuous reading never
// repeats to the last bit. A sensor whose noise is below its quantum (σ < q)
// legitimately repeats and is never flagged by this rule. Without any
// noise estimate (no records yet) the fixed rule StuckAfter applies instead.
func (s *State) stuckRule(opt Options) stuckLimit {
	lim := stuckLimit{minDur: opt.StuckMin, quantM: s.Sensor.QuantumM}
	var idle, fit []float64
	for _, r := range s.Sensor.Recs {
		if r.TimeNs < s.Sensor.EpochNs {
			continue
		}
		if r.Idle && len(idle) < opt.BaselineDrains {
			idle = append(idle, r.NoiseM)
		}
		if !r.Idle && len(fit) < opt.BaselineDrains && r.NoiseM > 0 {
			fit = append(fit, r.NoiseM)
		}
	}
	switch {
	case len(idle) >= 3:
		lim.sigmaM = median(idle)
	case len(fit) > 0:
		lim.sigmaM = median(fit)
	default:
		return lim
	}
	lim.known = true
	if !(lim.sigmaM > 0) || lim.sigmaM < lim.quantM {
		lim.never = true
		return lim
	}
	lim.pSame = pSameReading(lim.sigmaM, lim.quantM)
	lim.samples = stuckFloorSamples
	if lim.pSame > 0 {
		k := 1 + math.Ceil(math.Log(opt.SensorAlpha)/math.Log(lim.pSame))
		lim.samples = max(lim.samples, int(math.Min(k, 1e9)))
	}
	return lim
}

// stuckNow tells whether a run of n identical readings lasting dur signals.
func (l stuckLimit) stuckNow(n int, dur time.Duration, opt Options) bool {
	switch {
	case !l.known:
		return dur >= opt.StuckAfter
	case l.never:
		return false
	}
	return n >= l.samples && dur >= l.minDur
}

// stuckFindings reports the current run of identical readings when it meets
// the stuck rule, and every stuck run that ended within the last
// stuckMemory (24 h): a recovered sensor is reported once more for a day,
// with the stuck period as onset and end, because drains and idle periods
// fitted during it are suspect; after that it clears.
func (s *State) stuckFindings(now time.Time, opt Options) []Finding {
	ss := &s.Sensor
	if ss.LastSampleNs == 0 {
		return nil
	}
	lim := s.stuckRule(opt)
	var out []Finding
	mk := func(n int, from, to int64, current bool) Finding {
		dur := time.Duration(to - from)
		f := Finding{Tank: s.Tank, Kind: KindSensorFault, Subtype: SubStuck, DetectedAt: now,
			Onset: nsTime(from), OnsetLo: nsTime(from), OnsetHi: nsTime(from), FalseAlarmYears: opt.FalseAlarmYears}
		switch {
		case !lim.known:
			f.Statistic, f.Value, f.Threshold, f.PValue = "flat_h", dur.Hours(), opt.StuckAfter.Hours(), math.NaN()
			f.Evidence = fmt.Sprintf("the level reading has not changed by a single bit for %.1f h (limit %.1f h; no noise estimate yet)", dur.Hours(), opt.StuckAfter.Hours())
		default:
			f.Statistic, f.Value, f.Threshold = "flat_samples", float64(n), float64(lim.samples)
			f.PValue = math.Pow(lim.pSame, float64(n-1))
			f.Evidence = fmt.Sprintf("%d identical readings over %.1f h (limit %d readings and %.0f min; healthy noise %.2g m, quantum %.2g m, chance of a healthy repeat %.2g, so p = %.2g)",
				n, dur.Hours(), lim.samples, lim.minDur.Minutes(), lim.sigmaM, lim.quantM, lim.pSame, f.PValue)
		}
		if !current {
			f.Evidence = fmt.Sprintf("stuck from %s to %s, since recovered: ", nsTime(from).Format(time.RFC3339), nsTime(to).Format(time.RFC3339)) + f.Evidence
		}
		return f
	}
	if lim.stuckNow(ss.FlatRunN, time.Duration(ss.LastSampleNs-ss.FlatSinceNs), opt) {
		out = append(out, mk(ss.FlatRunN, ss.FlatSinceNs, ss.LastSampleNs, true))
	}
	for _, r := range ss.StuckRuns {
		if r.EndNs >= s.Sensor.EpochNs && now.UnixNano()-r.EndNs <= int64(stuckMemory) && r.EndNs <= now.UnixNano() {
			out = append(out, mk(r.N, r.StartNs, r.EndNs, false))
		}
	}
	return out
}
