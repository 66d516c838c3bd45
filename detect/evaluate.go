package detect

import (
	"fmt"
	"math"
	"slices"
	"time"

	"gonum.org/v1/gonum/stat/distuv"
)

// Finding kinds and subtypes.
const (
	KindRestriction   = "restriction"
	KindExcessOutflow = "excess_outflow"
	KindTankLeak      = "tank_leak"
	KindSensorFault   = "sensor_fault"

	SubGradual = "gradual"
	SubAbrupt  = "abrupt"
	SubStuck   = "stuck"
	SubSpikes  = "spikes"
	SubNoise   = "noise"
	SubDrift   = "drift"
	// SubSinceTest: the baseline departs from the commissioning test that
	// started it (see TestComparison).
	SubSinceTest = "since_commissioning"
	// SubNotRestored: the drains after a cleaning or repair stay below
	// the baseline before it (see State.restoredCheck).
	SubNotRestored = "not_restored"
)

// Finding is one active condition on a tank.
//
// DetectedAt is the evaluation time; Onset with [OnsetLo, OnsetHi] the
// estimated start (change point with its profile-likelihood interval; zero
// when not estimated). MagnitudePct is the change of K in percent of the
// baseline (negative for a restriction). Statistic names the test that
// fired, Value its current value and Threshold its limit; PValue is the
// chance that a healthy tank shows evidence this strong within the data
// seen (see each detector in the package doc); FalseAlarmYears is the design
// false-alarm interval of the detector. Evidence is one human sentence with
// the numbers.
type Finding struct {
	Tank            string    `json:"tank"`
	Kind            string    `json:"kind"`
	Subtype         string    `json:"subtype,omitempty"`
	DetectedAt      time.Time `json:"detected_at"`
	Onset           time.Time `json:"onset"`
	OnsetLo         time.Time `json:"onset_lo"`
	OnsetHi         time.Time `json:"onset_hi"`
	MagnitudePct    float64   `json:"magnitude_pct"`
	Statistic       string    `json:"statistic"`
	Value           float64   `json:"value"`
	Threshold       float64   `json:"threshold"`
	PValue          float64   `json:"p_value"`
	FalseAlarmYears float64   `json:"false_alarm_years"`
	Evidence        string    `json:"evidence"`
	Forecast        *Forecast `json:"forecast,omitempty"`
}

// Forecast projects the outlet constant on its Theil-Sen trend to the
// maintenance threshold MaintenanceFraction × baseline K.
//
// Date is when the trend line reaches ThresholdKM25s, [DateLo, DateHi] the
// dates from the ends of the slope's 95 % confidence interval (DateHi zero
// when the slower end does not fall). Reached is true when the current K is
// already below the threshold. Drain times are the typical fitted drain span
// at the baseline, current and threshold K (the span scales as 1/K for the
// same heads).
type Forecast struct {
	BaselineKM25s         float64   `json:"baseline_k_m25s"`
	CurrentKM25s          float64   `json:"current_k_m25s"`
	ThresholdKM25s        float64   `json:"threshold_k_m25s"`
	SlopePctPerDay        float64   `json:"slope_pct_per_day"`
	SlopeLoPctPerDay      float64   `json:"slope_lo_pct_per_day"`
	SlopeHiPctPerDay      float64   `json:"slope_hi_pct_per_day"`
	Date                  time.Time `json:"date"`
	DateLo                time.Time `json:"date_lo"`
	DateHi                time.Time `json:"date_hi"`
	Reached               bool      `json:"reached"`
	DrainTimeBaselineS    float64   `json:"drain_time_baseline_s"`
	DrainTimeNowS         float64   `json:"drain_time_now_s"`
	DrainTimeAtThresholdS float64   `json:"drain_time_at_threshold_s"`
}

const nsPerDay = 24 * 3600 * 1e9

func nsTime(ns int64) time.Time { return time.Unix(0, ns).UTC() }

// Evaluate returns the tank's active findings at time now. Sensor faults come
// first; while one is active the outlet and leak findings are withheld (a
// drifting or stuck sensor must not be reported as a restriction). While the
// feed has a gap in progress (Feed(now, opt).Withholds()) it returns nil:
// nothing is raised from too little data, and a caller keeping a lifecycle
// must not count such an evaluation as one without its findings (they are
// withheld, not gone). Data gaps themselves are never findings: they are the
// feed's status (Feed). Evaluate does not modify the state.
func (s *State) Evaluate(now time.Time, opt Options) []Finding {
	opt = opt.withDefaults()
	if s.Feed(now, opt).Withholds() {
		return nil
	}
	out := s.sensorFindings(now, opt)
	outlet := s.outletFindings(now, opt)
	if len(out) > 0 {
		return out
	}
	// A drift told from the idle falls is a sensor fault too: it withholds
	// the outlet findings.
	return sensorOnly(outlet)
}

// outletFindings runs the CUSUM, EWMA and leak charts and classifies.
func (s *State) outletFindings(now time.Time, opt Options) []Finding {
	var out []Finding
	leak, leakDrift := s.leakFinding(now, opt)
	if !s.Ref.Set || s.Monitored == 0 {
		if f := s.testFinding(now, opt); f != nil {
			out = append(out, *f)
		}
		if f := s.restoredFinding(now, opt); f != nil {
			out = append(out, *f)
		}
		if leak != nil {
			out = append(out, *leak)
		}
		if leakDrift != nil {
			out = append(out, *leakDrift)
		}
		return out
	}
	h := cusumH(opt.CUSUMK, s.chartARL0(opt))
	lim := ewmaL(opt.EWMALambda, s.ewmaARL0(opt))
	sig := math.Sqrt(opt.EWMALambda / (2 - opt.EWMALambda))
	ew := s.EWMA.Value / sig
	down := s.CUSUM.Lo > h || ew < -lim
	up := s.CUSUM.Hi > h || ew > lim
	base := Finding{Tank: s.Tank, DetectedAt: now, FalseAlarmYears: opt.FalseAlarmYears}
	stat := func(f *Finding, c float64, run int) {
		if c > h {
			f.Statistic, f.Value, f.Threshold = "cusum", c, h
			f.PValue = cusumTailPValue(opt.CUSUMK, c, s.Monitored)
		} else {
			f.Statistic, f.Value, f.Threshold = "ewma", math.Abs(ew), lim
			f.PValue = ewmaTailPValue(opt.EWMALambda, math.Abs(s.EWMA.Value), s.Monitored)
		}
		_ = run
	}
	switch {
	case down:
		f := base
		f.Kind = KindRestriction
		stat(&f, s.CUSUM.Lo, s.CUSUM.LoRun)
		s.classifyShift(&f, now, opt, s.CUSUM.LoRun)
		out = append(out, f)
	case up && leak != nil:
		// The K rise is the leak's extra outflow during drains.
		f := *leak
		f.Evidence += fmt.Sprintf("; drains also show K up (CUSUM %.2f, EWMA %.2f sd)", s.CUSUM.Hi, ew)
		leak = nil
		out = append(out, f)
	case up:
		f := base
		f.Kind = KindExcessOutflow
		stat(&f, s.CUSUM.Hi, s.CUSUM.HiRun)
		s.classifyShift(&f, now, opt, s.CUSUM.HiRun)
		f.Subtype = ""
		f.Forecast = nil
		// Idle periods since the onset: a combined leak score above 3 means
		// the extra outflow is a leak, before the leak chart itself signals.
		var sw, swk float64
		for _, ip := range s.Idle {
			if ip.TimeNs >= f.OnsetLo.UnixNano() {
				w := 1 / (ip.LeakKSE * ip.LeakKSE)
				sw += w
				swk += w * ip.LeakK
			}
		}
		zl := swk / math.Sqrt(sw)
		v, why := verdictUndecided, ""
		if sw > 0 && zl > 3 {
			v, why, _ = s.leakOrDrift(opt)
			// Undecided: the idle falls are not yet told from a drift and
			// the finding is withheld.
			if v == verdictDrift {
				if leakDrift == nil {
					d := Finding{Tank: s.Tank, DetectedAt: now, Kind: KindSensorFault, Subtype: SubDrift, Statistic: "idle_fall_score",
						Value: zl, Threshold: 3, PValue: math.NaN(), FalseAlarmYears: opt.FalseAlarmYears,
						Evidence: "level falls while shut, but " + why + ": sensor drift, not a leak"}
					leakDrift = &d
				}
			}
		}
		switch {
		case sw > 0 && zl > 3 && v != verdictLeak:
			// withheld (undecided) or a drift, reported as such below
		case sw > 0 && zl > 3:
			f.Kind = KindTankLeak
			f.MagnitudePct = 100 * swk / sw / s.Ref.KM25s
			f.Evidence = fmt.Sprintf("level falls while shut since %s: leak constant %.3g m^2.5/s (%.1f %% of the outlet K, combined score %.1f > 3); drains show K up (%s %.2f > %.2f)",
				f.OnsetLo.Format("2006-01-02"), swk/sw, f.MagnitudePct, zl, f.Statistic, f.Value, f.Threshold) + "; " + why
			out = append(out, f)
		default:
			f.Evidence += "; idle periods show no leak, so the outlet passes more than its baseline"
			out = append(out, f)
		}
	default:
		if f := s.testFinding(now, opt); f != nil {
			out = append(out, *f)
		}
		if f := s.restoredFinding(now, opt); f != nil {
			out = append(out, *f)
		}
	}
	if leak != nil {
		out = append(out, *leak)
	}
	if leakDrift != nil {
		out = append(out, *leakDrift)
	}
	return out
}

// testFinding reports a baseline that departs from the commissioning test
// that started it (TestComparison, P < commissionAlpha): a restriction
// when the baseline drains pass less than the test did, excess outflow
// when they pass more; Subtype SubSinceTest. Nil otherwise.
func (s *State) testFinding(now time.Time, opt Options) *Finding {
	c := s.Ref.Test
	if c == nil || !(c.P < commissionAlpha) {
		return nil
	}
	f := Finding{Tank: s.Tank, DetectedAt: now, Kind: KindRestriction, Subtype: SubSinceTest,
		MagnitudePct: 100 * math.Expm1(c.BaseLnK-c.TestLnK), Statistic: "commissioning_t", Value: math.Abs(c.T),
		Threshold: distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(c.DOF)}.Quantile(1 - commissionAlpha/2),
		PValue:    c.P, FalseAlarmYears: opt.FalseAlarmYears, Onset: nsTime(s.CommissionUntilNs)}
	word := "below"
	if c.T > 0 {
		f.Kind, word = KindExcessOutflow, "above"
	}
	f.Evidence = fmt.Sprintf("the %d baseline drains after the commissioning test of %s give K %.1f %% %s the test's %d (t = %.1f with %d dof, p = %.2g < %g): the outlet changed between the test and the baseline",
		c.BaseN, nsTime(s.EpochNs).Format("2006-01-02"), math.Abs(f.MagnitudePct), word, c.TestN, c.T, c.DOF, c.P, commissionAlpha)
	return &f
}

// restoredFinding reports maintenance that did not restore the outlet
// (restoredCheck): a restriction of subtype SubNotRestored, open until the
// next maintenance record. Nil otherwise.
func (s *State) restoredFinding(now time.Time, opt Options) *Finding {
	c, ok := s.restoredCheck(opt)
	if !ok || !(c.P < restoredAlpha/float64(opt.BaselineDrains)) {
		return nil
	}
	p := s.Prior
	f := Finding{Tank: s.Tank, DetectedAt: now, Kind: KindRestriction, Subtype: SubNotRestored,
		MagnitudePct: 100 * math.Expm1(c.BaseLnK-c.TestLnK), Statistic: "restored_t", Value: -c.T,
		Threshold: -distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(c.DOF)}.Quantile(restoredAlpha / float64(opt.BaselineDrains)),
		PValue:    c.P, FalseAlarmYears: opt.FalseAlarmYears, Onset: nsTime(p.AtNs)}
	f.Evidence = fmt.Sprintf("not restored by the maintenance (%s) of %s: the %d drains since give K %.1f %% below the baseline before it (t = %.1f with %d dof, p = %.2g); inspect the outlet again",
		p.Action, nsTime(p.AtNs).Format("2006-01-02"), c.BaseN, -f.MagnitudePct, c.T, c.DOF, c.P)
	return &f
}

// Shape decision constants (see classifyShift and the package doc).
const (
	shapeDecisive = 2.0 // log-likelihood units that settle step against broken line
	smallStepSD   = 2.0 // a step estimated below this many sd cannot be told from a ramp's start
)

// classifyShift locates the onset, measures the magnitude, tells a gradual
// change from a step and forecasts.
//
// The series is ln K of every drain since the reference was set (baseline
// drains first, then the monitored ones, at most 400). fitStepRamp profiles a
// step and a broken line over the change point, both with a free pre-change
// level; with σ² the reference variance of ln K, ΔLL = (RSS_step -
// RSS_ramp)/(2σ²) is the log-likelihood (and half the BIC) advantage of the
// ramp, and stepSD the fitted step in units of σ. The rule, in order:
//
//   - ΔLL >= +2: the broken line is clearly better: gradual;
//   - stepSD < 2 and ΔLL > -4: gradual. A fall caught while it is smaller
//     than 2 sd took many drains to build up, which is what the start of a
//     ramp looks like; a real step of 2 sd or more is caught within a few
//     drains of its onset. Such a small change is called a step only on
//     strong evidence (ΔLL <= -4);
//   - ΔLL <= -2: the step is clearly better: abrupt;
//   - otherwise gradual when at least 8 drains follow the fitted step and
//     Mann-Kendall (Hamed-Rao corrected, TrendAlpha) finds a trend of the
//     change's sign within them (flat after a true step, still moving on a
//     ramp); else abrupt.
//
// The decision is a function of the data only, so it is re-made at every
// Evaluate; as drains arrive ΔLL moves away from zero and the subtype settles
// on the better-supported model (a ramp that has only just been caught may be
// called abrupt if it started with a jump; a long ramp that has levelled off
// still fits a broken line better than a step until the plateau dominates).
func (s *State) classifyShift(f *Finding, now time.Time, opt Options, _ int) {
	all := make([]Point, 0, len(s.Learn)+len(s.Points))
	if len(s.Points) < maxPoints {
		all = append(all, s.Learn...)
	}
	all = append(all, s.Points...)
	n := len(all)
	td := make([]float64, n)
	y := make([]float64, n)
	for i, p := range all {
		td[i] = float64(p.TimeNs-all[0].TimeNs) / nsPerDay
		y[i] = p.LnK
	}
	s2 := math.Max(s.Ref.M2/float64(s.Ref.DegreesOF), s.minScatter2)
	if !(s2 > 0) {
		s2 = 0.005 * 0.005
	}
	sr := fitStepRamp(td, y)
	var dLL float64
	var mk MKResult
	var ts TheilSenResult
	gradual := false
	if sr.rssStep != nil {
		dLL = (sr.RSSStep - sr.RSSRamp) / (2 * s2)
		// Trend on ln K after the kink, against days before now.
		post := all[sr.RampIndex:]
		tt := make([]float64, len(post))
		yy := make([]float64, len(post))
		for i, p := range post {
			tt[i] = float64(p.TimeNs-now.UnixNano()) / nsPerDay
			yy[i] = p.LnK
		}
		mk = MannKendallCorrected(tt, yy)
		ts = TheilSen(tt, yy, 0.95)
		stepSD := math.Abs(sr.Shift) / math.Sqrt(s2)
		// Trend within the post-step segment: flat after a true step, still
		// falling (or rising) on a ramp.
		var postTrend bool
		if ps := all[sr.StepIndex:]; len(ps) >= 8 {
			pt := make([]float64, len(ps))
			py := make([]float64, len(ps))
			for i, p := range ps {
				pt[i] = float64(p.TimeNs-now.UnixNano()) / nsPerDay
				py[i] = p.LnK
			}
			pm := MannKendallCorrected(pt, py)
			postTrend = pm.P < opt.TrendAlpha && sgn(pm.S) == sgn(sr.Shift)
		}
		same := sgn(sr.Slope) == sgn(sr.Shift)
		switch {
		case dLL >= shapeDecisive:
			gradual = same
		case stepSD < smallStepSD && dLL > -2*shapeDecisive:
			gradual = same
		case dLL <= -shapeDecisive:
			gradual = false
		default:
			gradual = same && postTrend
		}
	}
	current := 0.0
	if gradual {
		f.Subtype = SubGradual
		lo, hi := profileInterval(sr.rssRamp, sr.RampIndex, s2)
		f.Onset, f.OnsetLo, f.OnsetHi = nsTime(all[sr.RampIndex].TimeNs), nsTime(all[lo].TimeNs), nsTime(all[hi].TimeNs)
		// The size is where K stands now: the median of the newest drains.
		// Theil-Sen's line extrapolated to now overshoots a ramp that has
		// levelled off (a valve seat worn to a new size, a deposit that
		// stopped growing); the median lags an ongoing ramp by half its
		// window (a few drains).
		current = recentLevel(all)
	} else {
		f.Subtype = SubAbrupt
		from := max(0, n-1)
		if sr.rssStep != nil {
			from = sr.StepIndex
			lo, hi := profileInterval(sr.rssStep, sr.StepIndex, s2)
			f.OnsetLo, f.OnsetHi = nsTime(all[lo].TimeNs), nsTime(all[hi].TimeNs)
		}
		f.Onset = nsTime(all[from].TimeNs)
		if sr.rssStep == nil {
			f.OnsetLo, f.OnsetHi = f.Onset, f.Onset
		}
		var sum float64
		for _, p := range all[from:] {
			sum += p.LnK
		}
		current = sum / float64(n-from)
	}
	f.MagnitudePct = 100 * (math.Exp(current-s.Ref.LnK) - 1)
	kind := "fell"
	if f.MagnitudePct > 0 {
		kind = "rose"
	}
	f.Evidence = fmt.Sprintf("K %s %.1f %% from baseline %.4g m^2.5/s (%s %.2f > %.2f, about one false finding per %.0f years at %.0f drains/year); change point %s (interval %s to %s)",
		kind, math.Abs(f.MagnitudePct), s.Ref.KM25s, f.Statistic, f.Value, f.Threshold, opt.FalseAlarmYears, s.drainsPerYear(),
		f.Onset.Format("2006-01-02"), f.OnsetLo.Format("2006-01-02"), f.OnsetHi.Format("2006-01-02"))
	if gradual {
		f.Evidence += fmt.Sprintf("; gradual: a ramp fits %.1f log-likelihood units better than a step, Theil-Sen %.3f %%/day (95 %% CI %.3f to %.3f), Mann-Kendall p = %.2g",
			dLL, 100*ts.Slope, 100*ts.Lo, 100*ts.Hi, mk.P)
	} else {
		f.Evidence += fmt.Sprintf("; abrupt step of %.2f sd (a step fits %.1f log-likelihood units better than a ramp)", sr.Shift/math.Sqrt(s2), -dLL)
	}
	f.Forecast = s.forecast(current, ts, gradual, now, opt)
}

func (s *State) forecast(current float64, ts TheilSenResult, trending bool, now time.Time, opt Options) *Forecast {
	kb := s.Ref.KM25s
	thr := opt.MaintenanceFraction * kb
	fc := &Forecast{BaselineKM25s: kb, CurrentKM25s: math.Exp(current), ThresholdKM25s: thr}
	if s.Ref.SpanKS > 0 {
		fc.DrainTimeBaselineS = s.Ref.SpanKS / kb
		fc.DrainTimeNowS = s.Ref.SpanKS / fc.CurrentKM25s
		fc.DrainTimeAtThresholdS = s.Ref.SpanKS / thr
	}
	if fc.CurrentKM25s <= thr {
		fc.Reached = true
	}
	if !trending || !(ts.Slope < 0) {
		return fc
	}
	fc.SlopePctPerDay, fc.SlopeLoPctPerDay, fc.SlopeHiPctPerDay = 100*ts.Slope, 100*ts.Lo, 100*ts.Hi
	gap := math.Log(thr) - current // negative when still above
	at := func(slope float64) time.Time {
		if !(slope < 0) {
			return time.Time{}
		}
		days := gap / slope
		return now.Add(time.Duration(days * nsPerDay))
	}
	fc.Date, fc.DateLo, fc.DateHi = at(ts.Slope), at(ts.Lo), at(ts.Hi)
	return fc
}

// leakFinding runs the idle leak CUSUM. A signal is a tank_leak when
// leakOrDrift finds a leak (the empty reading unchanged, or a fall rate
// growing with the head) and sensor drift (second return) when it finds a
// drift; until it decides the signal is withheld, for at most
// leakUndecidedMax after the first falling idle period, then reported as a
// leak with the evidence saying it was not told from drift.
func (s *State) leakFinding(now time.Time, opt Options) (leak, drift *Finding) {
	if s.LeakN == 0 {
		return nil, nil
	}
	arl := opt.FalseAlarmYears * eventsPerYear(s.IdleTimesNs) / shareLeak
	h := leakH(leakK, arl)
	if s.LeakCUSUM <= h {
		return nil, nil
	}
	// Idle periods with a clear fall among the recent ones.
	var lh, lr []float64
	var sumW, sumWK float64
	first := int64(0)
	for _, ip := range s.Idle[max(0, len(s.Idle)-30):] {
		if ip.LeakK/ip.LeakKSE > 3 && ip.RateMs < 0 && ip.MeanHeadM > 0 {
			lh = append(lh, math.Log(ip.MeanHeadM))
			lr = append(lr, math.Log(-ip.RateMs))
			if first == 0 {
				first = ip.TimeNs
			}
		}
		w := 1 / (ip.LeakKSE * ip.LeakKSE)
		sumW += w
		sumWK += w * ip.LeakK
	}
	meanLeak := sumWK / sumW
	f := Finding{Tank: s.Tank, DetectedAt: now, Kind: KindTankLeak, Statistic: "leak_cusum", Value: s.LeakCUSUM,
		Threshold: h, PValue: leakTailPValue(s.LeakCUSUM, s.LeakN), FalseAlarmYears: opt.FalseAlarmYears}
	if first != 0 {
		f.Onset = nsTime(first)
	}
	if s.Ref.Set && s.Ref.KM25s > 0 {
		f.MagnitudePct = 100 * meanLeak / s.Ref.KM25s
	}
	v, why, from := s.leakOrDrift(opt)
	switch v {
	case verdictDrift:
		f.Kind, f.Subtype = KindSensorFault, SubDrift
		f.Evidence = "level falls while shut, but " + why + ": sensor drift, not a leak"
		return nil, &f
	case verdictUndecided:
		if from == 0 || now.UnixNano()-from < int64(leakUndecidedMax) {
			return nil, nil // withheld until the evidence tells leak from drift
		}
	}
	f.Evidence = fmt.Sprintf("level falls while shut: leak constant %.3g m^2.5/s (%.1f %% of the outlet K) over the last idle periods, leak CUSUM %.1f > %.1f; %s",
		meanLeak, f.MagnitudePct, s.LeakCUSUM, h, why)
	if exp, expSE, ok := slopeOLS(lh, lr); ok {
		f.Evidence += fmt.Sprintf("; fall rate ∝ head^%.2f ± %.2f (sqrt(h - z) for an opening at z: 0.5 at the outlet, more above it, less below it)", exp, expSE)
	}
	return &f, nil
}

// leakTailPValue is the chance that the healthy one-sided leak CUSUM
// (k = leakK) reaches c within n idle periods, 1 - exp(-n/ARL0(c)), in [0, 1].
func leakTailPValue(c float64, n int) float64 {
	if !(c > 0) || n <= 0 {
		return 1
	}
	return tailPValue(float64(n), CUSUMARL(leakK, c, 0, 0))
}

// slopeOLS fits y = a + b x and returns b with its standard error; ok is
// false with fewer than 3 points or x spanning less than ln 1.5.
func slopeOLS(x, y []float64) (b, se float64, ok bool) {
	n := len(x)
	if n < 3 {
		return 0, 0, false
	}
	if slices.Max(x)-slices.Min(x) < math.Log(1.5) {
		return 0, 0, false
	}
	var mx, my float64
	for i := range x {
		mx += x[i]
		my += y[i]
	}
	mx /= float64(n)
	my /= float64(n)
	var sxx, sxy float64
	for i := range x {
		sxx += (x[i] - mx) * (x[i] - mx)
		sxy += (x[i] - mx) * (y[i] - my)
	}
	b = sxy / sxx
	var rss float64
	for i := range x {
		r := y[i] - my - b*(x[i]-mx)
		rss += r * r
	}
	se = math.Sqrt(rss / float64(n-2) / sxx)
	return b, math.Max(se, 1e-9), true
}

// sensorFindings runs the sensor checks (stuck, noise, spikes, drift).
func (s *State) sensorFindings(now time.Time, opt Options) []Finding {
	var out []Finding
	out = append(out, s.stuckFindings(now, opt)...)
	out = append(out, s.recordFindings(now, opt)...)
	return out
}

// recordFindings compares recent segment records with the baseline ones.
func (s *State) recordFindings(now time.Time, opt Options) []Finding {
	var out []Finding
	const recent = 5
	split := func(idle bool) (base, rec []SensorRec) {
		var all []SensorRec
		for _, r := range s.Sensor.Recs {
			if r.Idle == idle && r.TimeNs >= s.Sensor.EpochNs && !math.IsNaN(r.NoiseM) {
				all = append(all, r)
			}
		}
		nb := opt.BaselineDrains
		if len(all) < nb+recent {
			return nil, nil
		}
		return all[:nb], all[len(all)-recent:]
	}
	mk := func(sub, stat string, v, thr, p float64, ev string) Finding {
		return Finding{Tank: s.Tank, Kind: KindSensorFault, Subtype: sub, DetectedAt: now, Statistic: stat,
			Value: v, Threshold: thr, PValue: p, Evidence: ev}
	}
	noiseDone, spikeDone := false, false
	for _, idle := range []bool{true, false} {
		base, rec := split(idle)
		if base == nil {
			continue
		}
		what := "drain fits"
		eff := 1.0
		if idle {
			what = "idle periods"
			eff = 0.37 // MAD-based scatter: about 37 % of the degrees of freedom
		}
		// Stuck, from the segment records when no raw series is fed: the
		// latest idle period is one flat run of zero noise over at least 90 %
		// of it, as long as the stuck rule's run (stuckRule).
		if idle && s.Sensor.LastSampleNs == 0 {
			last := rec[len(rec)-1]
			lim := s.stuckRule(opt)
			if lim.known && !lim.never && last.NoiseM == 0 && last.FlatRun >= lim.samples && float64(last.FlatRun) >= 0.9*float64(last.N) {
				out = append(out, mk(SubStuck, "flat_run", float64(last.FlatRun), float64(lim.samples), math.Pow(lim.pSame, float64(last.FlatRun-1)),
					fmt.Sprintf("latest idle period: %d of %d readings identical and zero noise (healthy noise %.2g m, limit %d readings)", last.FlatRun, last.N, lim.sigmaM, lim.samples)))
			}
		}
		// Noise: F test on the variances, with a practical factor.
		bn, rn := medianNoise(base), medianNoise(rec)
		if !noiseDone && bn > 0 && rn/bn >= opt.NoiseFactor {
			d1, d2 := eff*float64(sumN(rec)-2*len(rec)), eff*float64(sumN(base)-2*len(base))
			if d1 > 0 && d2 > 0 {
				fstat := (rn * rn) / (bn * bn)
				p := distuv.F{D1: d1, D2: d2}.Survival(fstat)
				if p < opt.SensorAlpha {
					switch d, drift, quiet := s.drainOnlyScatter(idle, opt); {
					case drift:
						// The drain fits scatter because their datum moved,
						// not because the sensor got noisier.
						out = append(out, mk(SubDrift, "empty_shift_m", d, opt.DriftM, math.NaN(),
							fmt.Sprintf("the empty tank reading moved %+.3f m from its baseline while the idle noise did not rise; drain fits scatter %.1f× baseline because every reading is offset (sensor drift, not noise)", d, rn/bn)))
					case quiet:
						// Only the drains scatter, the idle readings are as
						// quiet as ever: the drains no longer follow the
						// square-root law (a leak off the outlet, say), which
						// is not a sensor fault.
					default:
						out = append(out, mk(SubNoise, "noise_ratio", rn/bn, opt.NoiseFactor, p,
							fmt.Sprintf("level noise in recent %s is %.1f× baseline (%.2g vs %.2g m; F = %.1f, p = %.2g)", what, rn/bn, rn, bn, fstat, p)))
					}
					noiseDone = true
				}
			}
		}
		// Spikes: Poisson test on the rate per sample.
		bs, bN := sumSpikes(base), sumN(base)
		rs, rN := sumSpikes(rec), sumN(rec)
		if !spikeDone && bN > 0 && rN > 0 {
			rate := math.Max((float64(bs)+0.5)/float64(bN), 1e-4)
			mu := rate * float64(rN)
			if rs > 0 && float64(rs)/float64(rN) >= opt.SpikeFactor*rate {
				p := 1 - distuv.Poisson{Lambda: mu}.CDF(float64(rs-1))
				if p < opt.SensorAlpha {
					out = append(out, mk(SubSpikes, "spike_rate", float64(rs)/float64(rN), opt.SpikeFactor*rate, p,
						fmt.Sprintf("%d spikes in %d samples of recent %s, %.1f× the baseline rate %.2g per sample (Poisson p = %.2g)", rs, rN, what, float64(rs)/float64(rN)/rate, rate, p)))
					spikeDone = true
				}
			}
		}
	}
	// Drift of the empty-tank reading on complete drains.
	var empties []SensorRec
	for _, r := range s.Sensor.Recs {
		if !r.Idle && r.HasEmpty && r.TimeNs >= s.Sensor.EpochNs {
			empties = append(empties, r)
		}
	}
	if nb := opt.BaselineDrains; len(empties) >= nb+recent {
		b := make([]float64, 0, nb)
		for _, r := range empties[:nb] {
			b = append(b, r.EmptyHeadM)
		}
		var rr []float64
		for _, r := range empties[len(empties)-recent:] {
			rr = append(rr, r.EmptyHeadM)
		}
		mb, mr := median(b), median(rr)
		if d := mr - mb; math.Abs(d) > opt.DriftM && (slices.Min(rr)-mb)*(slices.Max(rr)-mb) > 0 {
			f := mk(SubDrift, "empty_shift_m", d, opt.DriftM, math.NaN(),
				fmt.Sprintf("the empty tank now reads %+.3f m against %+.3f m at baseline (all of the last %d complete drains beyond, limit %.3f m)", mr, mb, recent, opt.DriftM))
			out = append(out, f)
		}
	}
	// Level rising while shut.
	if n := len(s.Idle); n >= recent {
		rising := 0
		for _, ip := range s.Idle[n-recent:] {
			if ip.RateSEMs > 0 && ip.RateMs > 3*ip.RateSEMs {
				rising++
			}
		}
		if rising >= recent-1 {
			out = append(out, mk(SubDrift, "rising_idle", float64(rising), float64(recent-1), math.NaN(),
				fmt.Sprintf("the level rose while the tank was shut in %d of the last %d idle periods", rising, recent)))
		}
	}
	return out
}

// medianNoise is the median NoiseM of the records that carry one (drain
// records kept only for their empty-tank reading have NaN).
func medianNoise(r []SensorRec) float64 {
	x := make([]float64, 0, len(r))
	for _, v := range r {
		if !math.IsNaN(v.NoiseM) {
			x = append(x, v.NoiseM)
		}
	}
	if len(x) == 0 {
		return math.NaN()
	}
	return median(x)
}

func sumN(r []SensorRec) int {
	n := 0
	for _, v := range r {
		n += v.N
	}
	return n
}

func sumSpikes(r []SensorRec) int {
	n := 0
	for _, v := range r {
		n += v.Spikes
	}
	return n
}

// recentDrains is how many of the newest drains give a gradual shift's
// current size.
const recentDrains = 8

// recentLevel is the median ln K of the newest recentDrains points.
func recentLevel(all []Point) float64 {
	k := min(recentDrains, len(all))
	y := make([]float64, k)
	for i, p := range all[len(all)-k:] {
		y[i] = p.LnK
	}
	return median(y)
}
