package detect

import (
	"fmt"
	"math"
	"slices"
	"time"
)

// Leak against drift: a level that falls while the outlet is shut is either
// water leaving the tank or a reading drifting down. The two leave different
// traces (see leakOrDrift), and the first finding waits until one of them
// tells which.
const (
	// leakDriftLLR is the log-likelihood ratio of the empty readings that
	// decides (ln 100: odds of 100 to 1).
	leakDriftLLR = 4.605
	// emptyNoiseFloorM floors the scatter of the empty-tank reading
	// (half a millimetre, a level transmitter's repeatability, from
	// memory; a factor 2 either way changes only how soon the ratio
	// decides).
	emptyNoiseFloorM = 0.0005
	// leakUndecidedMax: a leak signal the evidence has not told from drift
	// after this long is reported as a tank leak with that said (a tank
	// that never drains completely and idles at one head gives neither
	// trace).
	leakUndecidedMax = 7 * 24 * time.Hour
	// leakOnlyFraction: a drain fit whose K is below this share of the
	// reference K is a fall through a leak with the outlet shut, not a
	// drain (an outlet passing under 5 % of its baseline cannot be told from
	// a shut one); it feeds the leak chart as an idle period.
	leakOnlyFraction = 0.05
	// headMinPeriods: the head trace decides only over this many clearly
	// falling idle periods (fewer, picked for their fall, can show a slope
	// that is not there).
	headMinPeriods = 6
)

type leakVerdict int

const (
	verdictUndecided leakVerdict = iota
	verdictLeak
	verdictDrift
)

// leakOrDrift tells a tank leak from a falling sensor drift once idle
// periods show the level falling while shut.
//
// The falling idle periods are the recent ones (at most 30) with a leak
// score LeakK/LeakKSE > 3 and a falling level; the episode starts at the
// first of them (from, its start). Two traces separate the causes:
//
//   - the empty-tank reading of complete drains. A drift offsets every
//     reading, so after from the empty reading moves at the idle fall rate
//     r (the median of the falling periods'): e_i = e_b + r (t_i - from),
//     with e_b the median of the last BaselineDrains empty readings before
//     from. A leak leaves it where it was: e_i = e_b. With σ_e the scaled
//     MAD of those baseline readings (floored at emptyNoiseFloorM), the log-
//     likelihood ratio Σ [(e_i - e_b)² - (e_i - e_b - r (t_i - from))²] /
//     (2 σ_e²) over the complete drains after from decides at ±ln 100: drift
//     above, leak below;
//   - the head. A leak's fall rate grows with the head (sqrt(h - z) for an
//     opening at z), a drift's does not. The slope of ln(fall rate) on
//     ln(mean head) over the falling periods (heads spanning 1.5× at least)
//     is drift when within 2 SE of 0 and more than 3 SE from 0.5, leak when
//     more than 4 SE and 0.1 above 0.
//
// The empty readings come first: a fall with the empty reading unchanged is
// a leak whatever the head says. It returns the verdict, a sentence of
// evidence and the episode start.
func (s *State) leakOrDrift(opt Options) (leakVerdict, string, int64) {
	// The falling idle periods of the current episode: since the leak
	// CUSUM last rose from zero.
	var lh, lr, lw []float64
	var sw, swr float64
	var starts []int64
	first := int64(0)
	for _, ip := range s.Idle {
		st := ip.StartNs
		if st == 0 {
			st = ip.TimeNs
		}
		if st < s.LeakFromNs || !(ip.RateSEMs > 0) {
			continue
		}
		if first == 0 {
			starts = append(starts, st)
		}
		if ip.LeakK/ip.LeakKSE > 3 && ip.RateMs < 0 && ip.MeanHeadM > 0 {
			lh = append(lh, math.Log(ip.MeanHeadM))
			lr = append(lr, math.Log(-ip.RateMs))
			lw = append(lw, (ip.RateMs/ip.RateSEMs)*(ip.RateMs/ip.RateSEMs))
			if first == 0 {
				first = st
				// a drift may also have begun during the first clear fall
				starts = append(starts, ip.TimeNs)
			}
		}
		if first != 0 {
			w := 1 / (ip.RateSEMs * ip.RateSEMs)
			sw += w
			swr += w * ip.RateMs
		}
	}
	if first == 0 || !(sw > 0) {
		return verdictUndecided, "", 0
	}
	r := swr / sw // mean fall rate from the first clear fall on, m/s (negative)
	// Empty readings before the episode and after its first clear fall.
	var base []float64
	type empty struct {
		t int64
		e float64
	}
	var after []empty
	for _, rec := range s.Sensor.Recs {
		if rec.Idle || !rec.HasEmpty || rec.TimeNs < s.Sensor.EpochNs {
			continue
		}
		switch {
		case rec.TimeNs < starts[0]:
			base = append(base, rec.EmptyHeadM)
		case rec.TimeNs >= first:
			after = append(after, empty{rec.TimeNs, rec.EmptyHeadM})
		}
	}
	if len(base) >= 3 && len(after) > 0 {
		base = base[max(0, len(base)-opt.BaselineDrains):]
		eb := median(base)
		dev := make([]float64, len(base))
		for i, v := range base {
			dev[i] = math.Abs(v - eb)
		}
		se := math.Max(1.4826*median(dev), emptyNoiseFloorM)
		// A drift began at one of the idle starts of the episode, at the
		// first clear fall at the latest: the most favourable start is
		// taken (the leak is then called only against the best drift).
		best, n := math.Inf(-1), 0
		for _, ts := range starts {
			var llr float64
			m := 0
			for _, a := range after {
				if a.t < ts {
					continue
				}
				d := a.e - eb
				p := r * float64(a.t-ts) / 1e9
				llr += (d*d - (d-p)*(d-p)) / (2 * se * se)
				m++
			}
			if m > 0 && llr > best {
				best, n = llr, m
			}
		}
		switch {
		case best >= leakDriftLLR:
			return verdictDrift, fmt.Sprintf("the empty tank reading moved with the fall (%d complete drains since %s, log-likelihood ratio %.1f for drift over a leak; the level falls %.2f mm/h while shut)",
				n, nsTime(first).Format("2006-01-02 15:04"), best, -r*3.6e6), first
		case n > 0 && best <= -leakDriftLLR:
			return verdictLeak, fmt.Sprintf("the empty tank reading is unchanged (%d complete drains since %s, log-likelihood ratio %.1f for a leak over drift)",
				n, nsTime(first).Format("2006-01-02 15:04"), -best), first
		}
	}
	if exp, expSE, ok := slopeWLS(lh, lr, lw); ok {
		switch {
		case len(lh) >= headMinPeriods && expSE <= 0.05 && math.Abs(exp) < 2*expSE && math.Abs(exp-0.5) > 3*expSE:
			return verdictDrift, fmt.Sprintf("the level falls while shut at a rate that does not follow the head (rate ∝ head^%.2f ± %.2f over %d idle periods; a leak's rate grows with the head)", exp, expSE, len(lh)), first
		case len(lh) >= headMinPeriods && exp > 5*expSE && exp > 0.25:
			return verdictLeak, fmt.Sprintf("the fall rate grows with the head (rate ∝ head^%.2f ± %.2f over %d idle periods; a drift's does not)", exp, expSE, len(lh)), first
		}
	}
	return verdictUndecided, fmt.Sprintf("not yet told from sensor drift (%d complete drains and %d falling idle periods since %s)", len(after), len(lh), nsTime(first).Format("2006-01-02 15:04")), first
}

// slopeWLS fits y = a + b x with weights w (inverse variances of y) and
// returns b with its standard error from those variances, inflated by
// sqrt(χ²/(n-2)) when the points scatter more than they claim; ok is false
// with fewer than 4 points or x spanning less than ln 1.5.
func slopeWLS(x, y, w []float64) (b, se float64, ok bool) {
	n := len(x)
	if n < 4 || slices.Max(x)-slices.Min(x) < math.Log(1.5) {
		return 0, 0, false
	}
	var sw, mx, my float64
	for i := range x {
		sw += w[i]
		mx += w[i] * x[i]
		my += w[i] * y[i]
	}
	mx /= sw
	my /= sw
	var sxx, sxy float64
	for i := range x {
		sxx += w[i] * (x[i] - mx) * (x[i] - mx)
		sxy += w[i] * (x[i] - mx) * (y[i] - my)
	}
	if !(sxx > 0) {
		return 0, 0, false
	}
	b = sxy / sxx
	var chi2 float64
	for i := range x {
		e := y[i] - my - b*(x[i]-mx)
		chi2 += w[i] * e * e
	}
	se = math.Sqrt(math.Max(1, chi2/float64(n-2)) / sxx)
	return b, se, true
}

// leakOnlyFall tells whether a drain fit is a fall through a leak with the
// outlet shut: K below leakOnlyFraction of the reference.
func (s *State) leakOnlyFall(k float64) bool {
	return s.Ref.Set && s.Ref.KM25s > 0 && k > 0 && k < leakOnlyFraction*s.Ref.KM25s
}

// sensorOnly keeps the sensor findings of fs when there are any (a sensor
// fault withholds the outlet findings), else returns fs.
func sensorOnly(fs []Finding) []Finding {
	i := slices.IndexFunc(fs, func(f Finding) bool { return f.Kind == KindSensorFault })
	if i < 0 {
		return fs
	}
	var out []Finding
	for _, f := range fs {
		if f.Kind == KindSensorFault {
			out = append(out, f)
		}
	}
	return out
}

// drainOnlyScatter looks behind a rise of the drain fits' scatter (idle
// false): a sensor that got noisier shows it while the tank is shut too; a
// drift offsets every reading, so drains fitted to the outlet's datum
// misfit while the idle periods stay quiet; and drains that no longer
// follow the square-root law (a leak through an opening off the outlet)
// misfit the same way. quiet is true when the idle periods' noise (the last
// 5 against the first BaselineDrains since the sensor epoch, with at least
// that many) stayed below NoiseFactor × baseline; drift is true when, in
// addition, the latest complete drain's empty reading lies more than DriftM
// from the median of the first BaselineDrains ones, and d is that shift.
func (s *State) drainOnlyScatter(idle bool, opt Options) (d float64, drift, quiet bool) {
	if idle {
		return 0, false, false
	}
	var idleNoise, empties []float64
	for _, r := range s.Sensor.Recs {
		if r.TimeNs < s.Sensor.EpochNs {
			continue
		}
		switch {
		case r.Idle && !math.IsNaN(r.NoiseM):
			idleNoise = append(idleNoise, r.NoiseM)
		case !r.Idle && r.HasEmpty:
			empties = append(empties, r.EmptyHeadM)
		}
	}
	nb := opt.BaselineDrains
	n := len(idleNoise)
	if n < nb+5 {
		return 0, false, false
	}
	if b := median(idleNoise[:nb]); !(b > 0) || median(idleNoise[n-5:]) >= opt.NoiseFactor*b {
		return 0, false, false // the idle periods are noisier too: noise
	}
	if len(empties) <= nb {
		return 0, false, true
	}
	d = empties[len(empties)-1] - median(empties[:nb])
	return d, math.Abs(d) > opt.DriftM, true
}
