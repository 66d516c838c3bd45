package detect

import (
	"fmt"
	"math"
	"slices"
	"time"

	"gonum.org/v1/gonum/stat"
	"gonum.org/v1/gonum/stat/distuv"

	"drainsight/model"
)

// StateVersion is the layout version written into State.Version.
const StateVersion = 1

// History caps, so that a persisted State stays small (a few tens of kB).
const (
	maxPoints     = 400 // monitored drains kept for trend and change point
	maxIdle       = 200 // idle periods kept
	maxFreq       = 120 // fit times kept for the drain frequency
	maxSensorRecs = 200 // per-segment sensor records kept
	maxGaps       = 200 // gaps kept
	zClip         = 4.0 // standardised values are clipped to ±zClip (winsorised)
)

// State is one tank's detector state. It is plain data with JSON tags: the
// durable store persists it between runs and a later run continues the
// statistics. Fits and idle periods must be added in time order. Not safe
// for concurrent use; distinct States are independent.
type State struct {
	Tank    string `json:"tank"`
	Version int    `json:"version"`

	// EpochNs is the start of the current outlet baseline (0 at
	// commissioning, else the time of the last cleaning/repair/replacement).
	EpochNs    int64  `json:"epoch_ns"`
	LastAction string `json:"last_action,omitempty"`
	// CommissionUntilNs is the end of the accepted commissioning test that
	// started the current baseline (0 when none did): the accepted drains
	// up to it are the test's (see TestComparison).
	CommissionUntilNs int64 `json:"commission_until_ns,omitempty"`
	// Prior is the outlet baseline before the last cleaning or repair
	// (nil after a replacement, a commissioning or when none was set):
	// the drains after it are compared with it (restoredCheck).
	Prior       *PriorBaseline `json:"prior,omitempty"`
	LastFitNs   int64          `json:"last_fit_end_ns"`
	LastIdleNs  int64          `json:"last_idle_end_ns"`
	FitTimesNs  []int64        `json:"fit_times_ns"`  // recent accepted drain ends, for the drain frequency
	IdleTimesNs []int64        `json:"idle_times_ns"` // recent idle ends, for the idle frequency

	Ref   Reference `json:"ref"`
	Learn []Point   `json:"learn"` // the reference set (baseline and learned drains)

	CUSUM     CUSUM   `json:"cusum"`
	EWMA      EWMA    `json:"ewma"`
	Monitored int     `json:"monitored"` // drains standardised since the reference was set
	Points    []Point `json:"points"`    // monitored drains, newest last, capped

	Idle      []IdlePoint `json:"idle"`
	LeakCUSUM float64     `json:"leak_cusum"` // one-sided upper CUSUM on leak scores
	LeakN     int         `json:"leak_n"`
	// LeakFromNs is the start of the idle period at which the leak CUSUM
	// last rose from zero: the earliest the current fall can have begun.
	LeakFromNs int64 `json:"leak_from_ns,omitempty"`

	Sensor SensorState `json:"sensor"`

	minScatter2 float64 // MinScatter^2 of the last AddFit call
}

// Reference is the outlet baseline.
//
// The first BaselineDrains accepted drains give a robust start: their median
// ln K (BaseLnK) and scaled MAD screen out gross outliers (beyond 3.5 MAD),
// and the remaining drains seed running sums. From then on every drain that
// looks in control joins the sums (self-starting, Hawkins 1987): LnK is the
// running mean of ln K (or ln DesignKM25s), M2 the sum of squared deviations
// about it, N the count, so s^2 = M2/DegreesOF is the total between-drain
// variance and Tau = sqrt(max(0, s^2 - MeanSE2)) the scatter beyond the fit
// error.
type Reference struct {
	Set       bool    `json:"set"`
	Design    bool    `json:"design"`
	LnK       float64 `json:"ln_k"`
	BaseLnK   float64 `json:"base_ln_k"`
	MAD       float64 `json:"mad"`
	M2        float64 `json:"m2"`
	SumSE2    float64 `json:"sum_se2"`
	MeanSE2   float64 `json:"mean_se2"`
	Tau       float64 `json:"tau"`
	N         int     `json:"n"`
	DegreesOF int     `json:"dof"`
	SetAtNs   int64   `json:"set_at_ns"`
	SpanKS    float64 `json:"span_k"` // median of (fitted drain span × K), m^2.5, for drain-time forecasts
	KM25s     float64 `json:"k_m25s"`
	// Exponent and HRefM: when the baseline drains agree on an exponent
	// off the square-root law (see referenceExponent), every K is compared
	// at that exponent and this reference head (model.KAtReference);
	// 0: the square-root law, K as fitted.
	Exponent float64 `json:"exponent,omitempty"`
	HRefM    float64 `json:"h_ref_m,omitempty"`
	// Test is the comparison of the baseline drains with the commissioning
	// test that started the baseline (nil when none did).
	Test *TestComparison `json:"test,omitempty"`
}

// Point is one accepted drain: time (end of the fit), ln K, the relative
// standard error se/K, the fitted span (s) and the standardised score Z
// (0 for baseline drains, which are not scored).
type Point struct {
	TimeNs int64   `json:"t"`
	LnK    float64 `json:"lnk"`
	SERel  float64 `json:"se"`
	SpanS  float64 `json:"span"`
	Z      float64 `json:"z"`
	// The drain's own fit, kept so that LnK can be restated at the tank's
	// exponent (Reference.Exponent): square-root K, dK/dn, exponent and
	// mid-drain head (m).
	KRaw  float64 `json:"k_raw,omitempty"`
	KdN   float64 `json:"k_dn,omitempty"`
	Exp   float64 `json:"n,omitempty"`
	HMidM float64 `json:"h_mid_m,omitempty"`
}

// IdlePoint is one idle period (end TimeNs, start StartNs; 0 in states
// written before it was kept): leak constant and its standard error, the
// mean head, the mean rate and its standard error.
type IdlePoint struct {
	TimeNs    int64   `json:"t"`
	StartNs   int64   `json:"t0,omitempty"`
	LeakK     float64 `json:"leak_k"`
	LeakKSE   float64 `json:"leak_k_se"`
	MeanHeadM float64 `json:"head_m"`
	RateMs    float64 `json:"rate_ms"`
	RateSEMs  float64 `json:"rate_se_ms"`
}

// SensorState holds what the sensor checks need. FlatSinceNs is the first
// sample of the current run of bit-identical readings and FlatRunN its
// sample count; QuantumM is the smallest non-zero step (above 1 nm) seen
// between consecutive readings, the resolution estimate (0 until one is
// seen); StuckRuns are finished runs that met the stuck rule.
type SensorState struct {
	EpochNs      int64       `json:"epoch_ns"`
	LastSampleNs int64       `json:"last_sample_ns"`
	LastHeadM    float64     `json:"last_head_m"`
	FlatSinceNs  int64       `json:"flat_since_ns"`
	FlatRunN     int         `json:"flat_run_n"`
	QuantumM     float64     `json:"quantum_m"`
	StuckRuns    []StuckRun  `json:"stuck_runs,omitempty"`
	Gaps         []Gap       `json:"gaps"`
	Recs         []SensorRec `json:"recs"`
}

// Gap is a stretch without samples.
type Gap struct {
	StartNs int64 `json:"start_ns"`
	EndNs   int64 `json:"end_ns"`
}

// SensorRec is the sensor evidence from one fitted segment: the number of
// samples, the spikes/outliers rejected, the level noise (idle NoiseM or the
// fit's SigmaM), the longest flat run, and the empty-tank reading of a
// complete drain (HasEmpty; 0 otherwise). Idle tells which kind of segment
// it is. JSON has no NaN, so absent values are flagged rather than NaN.
type SensorRec struct {
	TimeNs     int64   `json:"t"`
	Idle       bool    `json:"idle"`
	N          int     `json:"n"`
	Spikes     int     `json:"spikes"`
	NoiseM     float64 `json:"noise_m"`
	FlatRun    int     `json:"flat_run"`
	EmptyHeadM float64 `json:"empty_m"`
	HasEmpty   bool    `json:"has_empty"`
}

// NewState returns the empty state of a tank.
func NewState(tank string) *State {
	return &State{Tank: tank, Version: StateVersion}
}

func appendCapped[T any](s []T, v T, limit int) []T {
	s = append(s, v)
	if len(s) > limit {
		s = slices.Delete(s, 0, len(s)-limit)
	}
	return s
}

// AddFit adds one drain fit. Fits must come in time order; a fit whose end is
// not after the last one seen is ignored (so re-reading a window is
// harmless), as is one ending before the current epoch. Fits graded below
// opt.MinQuality, or with a non-positive or non-finite K, do not enter the
// outlet statistics but still feed the sensor checks. A fit whose K is below
// 5 % of the reference (leakOnlyFraction) is a fall through a leak with the
// outlet shut: it enters neither the outlet charts nor the sensor checks and
// feeds the leak chart as an idle period (leak constant K, rate from its
// heads and span).
func (s *State) AddFit(f model.Fit, opt Options) {
	opt = opt.withDefaults()
	if f.EndNs <= s.LastFitNs || f.EndNs < s.EpochNs {
		return
	}
	s.LastFitNs = f.EndNs
	if s.leakOnlyFall(f.KM25s) && f.KSEM25s > 0 && f.EndNs > f.StartNs {
		// A fall far slower than the outlet allows: the outlet was shut and
		// a leak drained the tank. It is an idle period for the leak chart,
		// not a drain, and its end is no empty-tank reading.
		span := float64(f.EndNs-f.StartNs) / 1e9
		rate := (f.H1M - f.H0M) / span
		s.addIdlePoint(IdlePoint{TimeNs: f.EndNs, StartNs: f.StartNs, LeakK: f.KM25s, LeakKSE: f.KSEM25s,
			MeanHeadM: 0.5 * (f.H0M + f.H1M), RateMs: rate, RateSEMs: math.Abs(rate) * f.KSEM25s / f.KM25s})
		return
	}
	switch {
	case f.Quality == model.QualityA:
		s.Sensor.Recs = appendCapped(s.Sensor.Recs, SensorRec{
			TimeNs: f.EndNs, N: f.N, Spikes: f.Outliers, NoiseM: f.SigmaM,
			EmptyHeadM: f.EmptyHeadM, HasEmpty: f.Complete && !math.IsNaN(f.EmptyHeadM),
		}, maxSensorRecs)
	case f.Quality != model.QualityReject && f.Complete && !math.IsNaN(f.EmptyHeadM):
		// A drain the square-root law fits less well (grade B or C: inflow,
		// a valve closing, a transient) says little about the sensor: its
		// outliers and residual scatter come from the model, not the
		// instrument. Only its empty-tank reading is kept, for drift.
		s.Sensor.Recs = appendCapped(s.Sensor.Recs, SensorRec{
			TimeNs: f.EndNs, NoiseM: math.NaN(), EmptyHeadM: f.EmptyHeadM, HasEmpty: true,
		}, maxSensorRecs)
	}
	if !opt.Accepts(f) {
		return
	}
	se := f.KSEM25s / f.KM25s
	if !(se >= 0) || math.IsInf(se, 0) {
		se = 0
	}
	s.minScatter2 = opt.MinScatter * opt.MinScatter
	s.FitTimesNs = appendCapped(s.FitTimesNs, f.EndNs, maxFreq)
	p := Point{TimeNs: f.EndNs, LnK: math.Log(f.KM25s), SERel: se, SpanS: float64(f.EndNs-f.StartNs) / 1e9,
		KRaw: f.KM25s, KdN: nanZero(f.KPerExponent), Exp: nanZero(f.Exponent), HMidM: 0.5 * (f.H0M + f.H1M)}
	if s.Ref.Set && s.Ref.Exponent != 0 {
		if k := model.KAtReference(f, s.Ref.Exponent, s.Ref.HRefM); k > 0 && !math.IsInf(k, 0) {
			p.LnK = math.Log(k)
		}
	}

	if !s.Ref.Set {
		s.Learn = append(s.Learn, p)
		if len(s.Learn) >= opt.BaselineDrains {
			s.setReference(opt)
			s.Ref.SetAtNs = f.EndNs
		}
		return
	}
	t, tRaw := s.score(p)
	p.Z = t
	s.CUSUM.K = opt.CUSUMK
	s.EWMA.Lambda = opt.EWMALambda
	s.CUSUM.Update(t)
	s.EWMA.Update(t)
	s.Monitored++
	s.Points = appendCapped(s.Points, p, maxPoints)

	if opt.LearnDrains == 0 || s.Ref.N < opt.LearnDrains {
		h := cusumH(opt.CUSUMK, s.chartARL0(opt))
		l := ewmaL(opt.EWMALambda, s.ewmaARL0(opt)) * s.EWMA.Sigma()
		if math.Abs(tRaw) < 6 && s.CUSUM.Hi <= h && s.CUSUM.Lo <= h && math.Abs(s.EWMA.Value) <= l {
			s.learn(p)
		}
	}
}

// learn adds an in-control drain to the running reference (Welford).
func (s *State) learn(p Point) {
	r := &s.Ref
	r.N++
	r.SumSE2 += p.SERel * p.SERel
	if r.Design {
		d := p.LnK - r.LnK
		r.M2 += d * d
	} else {
		d := p.LnK - r.LnK
		r.LnK += d / float64(r.N)
		r.M2 += d * (p.LnK - r.LnK)
	}
	s.refDerived()
}

func (s *State) refDerived() {
	r := &s.Ref
	r.DegreesOF = r.N - 1
	if r.Design {
		r.DegreesOF = r.N
	}
	r.DegreesOF = max(r.DegreesOF, 1)
	r.MeanSE2 = r.SumSE2 / float64(max(r.N, 1))
	r.Tau = math.Sqrt(math.Max(0, r.M2/float64(r.DegreesOF)-r.MeanSE2))
	r.KM25s = math.Exp(r.LnK)
}

// setReference builds the reference from the baseline drains: the median
// and scaled MAD of ln K (about ln DesignKM25s when given) screen out drains
// beyond 3.5 MAD, and the rest seed the running sums.
func (s *State) setReference(opt Options) {
	nb, href := s.referenceExponent()
	x := make([]float64, len(s.Learn))
	spanK := make([]float64, len(s.Learn))
	for i, p := range s.Learn {
		x[i] = p.LnK
		spanK[i] = p.SpanS * math.Exp(p.LnK)
	}
	ref := median(x)
	design := opt.DesignKM25s > 0
	if design {
		ref = math.Log(opt.DesignKM25s)
	}
	dev := make([]float64, len(x))
	for i, v := range x {
		dev[i] = math.Abs(v - ref)
	}
	mad := 1.4826 * median(dev)
	s.Ref = Reference{Set: true, Design: design, BaseLnK: ref, MAD: mad, SpanKS: median(spanK), Exponent: nb, HRefM: href}
	if design {
		s.Ref.LnK = ref
	}
	for i, p := range s.Learn {
		if mad > 0 && dev[i] > 3.5*mad {
			continue
		}
		s.learn(p)
	}
	if s.Ref.N == 0 {
		s.Ref.LnK = ref
		s.refDerived()
	}
	if s.CommissionUntilNs > 0 {
		// Every baseline drain, screened or not: the screen is about the
		// median of all, test included, and a drain it sets aside is
		// evidence too.
		var test, rest []float64
		for _, p := range s.Learn {
			if p.TimeNs <= s.CommissionUntilNs {
				test = append(test, p.LnK)
			} else {
				rest = append(rest, p.LnK)
			}
		}
		s.Ref.Test = compareWithTest(test, rest, opt.MinScatter)
	}
}

// commissionAlpha is the false-alarm probability of the comparison of a
// baseline with its commissioning test: one test per commissioned
// baseline, so a healthy tank raises a finding from it with probability
// 0.001 per commissioning.
const commissionAlpha = 0.001

// TestComparison compares the baseline drains that followed an accepted
// commissioning test with the test's own drains: the ln K of the test's m
// drains (mean TestLnK) against the n later baseline drains (mean
// BaseLnK), by the two-sample t statistic with pooled variance (Student
// 1908; Welch's form needs a variance of each sample, and a test is often
// a single drain):
//
//	t = (mean_b - mean_t) / (s sqrt(1/m + 1/n)),  s^2 = Σ(x - mean)^2 / (m + n - 2)
//
// sums over each sample about its own mean, s floored at MinScatter, with
// ν = m + n - 2 degrees of freedom; P is the two-sided p-value. A P below
// commissionAlpha means the outlet changed between the test and the
// baseline (fouled at once, or a valve left partly shut), which a baseline
// learned from those drains cannot show: Evaluate reports it until the next
// maintenance record restarts the baseline. Nil when fewer than 2 later
// drains or no test drain was accepted.
type TestComparison struct {
	TestN   int     `json:"test_n"`
	BaseN   int     `json:"base_n"`
	TestLnK float64 `json:"test_ln_k"`
	BaseLnK float64 `json:"base_ln_k"`
	T       float64 `json:"t"`
	DOF     int     `json:"dof"`
	P       float64 `json:"p"`
}

func compareWithTest(test, base []float64, minScatter float64) *TestComparison {
	m, n := len(test), len(base)
	if m == 0 || n < 2 {
		return nil
	}
	mt, mb := stat.Mean(test, nil), stat.Mean(base, nil)
	var ss float64
	for _, x := range test {
		ss += (x - mt) * (x - mt)
	}
	for _, x := range base {
		ss += (x - mb) * (x - mb)
	}
	dof := m + n - 2
	sd := math.Max(math.Sqrt(ss/float64(dof)), minScatter)
	t := (mb - mt) / (sd * math.Sqrt(1/float64(m)+1/float64(n)))
	p := 2 * distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(dof)}.Survival(math.Abs(t))
	return &TestComparison{TestN: m, BaseN: n, TestLnK: mt, BaseLnK: mb, T: t, DOF: dof, P: p}
}

// score standardises a drain against the reference (Hawkins 1987,
// self-starting): with s^2 = M2/ν the reference variance of ln K (ν its
// degrees of freedom, s floored at MinScatter),
//
//	T = (ln K - LnK) / sqrt(s^2 (1 + 1/n) + max(0, se^2 - MeanSE2))
//
// (no 1/n term for a design K; the last term widens drains fitted less
// well than usual) follows Student's t with ν degrees of freedom for a
// healthy tank, and z = Φ^{-1}(F_t(T)) is exactly N(0, 1) although the
// reference was estimated. z is clipped to ±4 (winsorised) so that one wild
// drain cannot raise an alarm alone. It returns z and T.
func (s *State) score(p Point) (z, t float64) {
	r := &s.Ref
	s2 := math.Max(r.M2/float64(r.DegreesOF), s.minScatter2)
	v := s2
	if !r.Design {
		v *= 1 + 1/float64(max(r.N, 1))
	}
	v += math.Max(0, p.SERel*p.SERel-r.MeanSE2)
	t = (p.LnK - r.LnK) / math.Sqrt(v)
	u := distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(r.DegreesOF)}.CDF(t)
	u = math.Min(math.Max(u, 1e-12), 1-1e-12)
	z = normQuantile(u)
	return math.Max(-zClip, math.Min(zClip, z)), t
}

// drainsPerYear is the tank's drain frequency used for the chart limits
// (see eventsPerYear).
func (s *State) drainsPerYear() float64 {
	return eventsPerYear(s.FitTimesNs)
}

// maxEventsPerYear caps the early, conservative frequency: one event every
// 30 minutes.
const maxEventsPerYear = 48 * 365.25

// eventsPerYear is the event frequency behind the chart limits. Over the
// recent events (at most maxFreq) spanning at least two weeks and at least 8
// events it is the observed rate (n-1)/span. Before that it is conservative:
// the larger of one a day and the upper 97.5 % Poisson bound of the rate,
// χ²_{0.975}(2n)/(2 span) (Garwood 1936), capped at maxEventsPerYear; so a
// tank that drains several times a day gets limits for its true rate (or a
// higher one) from its first evaluations, and the per-year false-alarm rate
// holds from the start.
func eventsPerYear(ts []int64) float64 {
	const year = 365.25 * 24 * 3600 * 1e9
	n := len(ts)
	if n >= 8 && float64(ts[n-1]-ts[0]) >= 14*24*3600*1e9 {
		return float64(n-1) / (float64(ts[n-1]-ts[0]) / year)
	}
	if n < 2 || ts[n-1] <= ts[0] {
		return maxEventsPerYear
	}
	span := float64(ts[n-1]-ts[0]) / year
	up := distuv.ChiSquared{K: float64(2 * n)}.Quantile(0.975) / (2 * span)
	return math.Min(maxEventsPerYear, math.Max(365, up))
}

// Shares of the false-alarm budget: the outlet CUSUM, the outlet EWMA and
// the idle leak CUSUM each get one third of the 1/FalseAlarmYears false
// findings per year, so each chart's in-control ARL is 3 × FalseAlarmYears ×
// events per year.
const (
	shareCUSUM = 1.0 / 3
	shareEWMA  = 1.0 / 3
	shareLeak  = 1.0 / 3
)

// chartARL0 is the in-control ARL (in drains) of a chart with the given
// share of the false-alarm budget.
func (s *State) chartARL0(opt Options) float64 {
	return opt.FalseAlarmYears * s.drainsPerYear() / shareCUSUM
}

// ewmaARL0 is the in-control ARL (in drains) of the outlet EWMA.
func (s *State) ewmaARL0(opt Options) float64 {
	return opt.FalseAlarmYears * s.drainsPerYear() / shareEWMA
}

// AddIdle adds one idle-period fit (in time order; repeats are ignored).
// Its leak constant feeds a one-sided CUSUM on the leak score
// z = LeakKM25s / LeakKSEM25s (k = 0.5, clipped to ±4); its noise, spikes
// and flat run feed the sensor checks. The options are accepted for symmetry
// with AddFit; nothing recorded here depends on them.
func (s *State) AddIdle(f model.IdleFit, _ Options) {
	if f.EndNs <= s.LastIdleNs || f.EndNs < s.EpochNs {
		return
	}
	s.LastIdleNs = f.EndNs
	s.Sensor.Recs = appendCapped(s.Sensor.Recs, SensorRec{
		TimeNs: f.EndNs, Idle: true, N: f.N, Spikes: f.Spikes, NoiseM: f.NoiseM, FlatRun: f.FlatRun,
	}, maxSensorRecs)
	if !(f.LeakKSEM25s > 0) || math.IsNaN(f.LeakKM25s) {
		return
	}
	s.addIdlePoint(IdlePoint{
		TimeNs: f.EndNs, StartNs: f.StartNs, LeakK: f.LeakKM25s, LeakKSE: f.LeakKSEM25s, MeanHeadM: f.MeanHeadM, RateMs: f.RateMs, RateSEMs: f.RateSEMs,
	})
}

// addIdlePoint feeds one idle period (or a leak-only fall) to the leak chart.
func (s *State) addIdlePoint(ip IdlePoint) {
	s.IdleTimesNs = appendCapped(s.IdleTimesNs, ip.TimeNs, maxFreq)
	s.Idle = appendCapped(s.Idle, ip, maxIdle)
	z := math.Max(-zClip, math.Min(zClip, ip.LeakK/ip.LeakKSE))
	prev := s.LeakCUSUM
	s.LeakCUSUM = math.Max(0, s.LeakCUSUM+z-leakK)
	if prev == 0 && s.LeakCUSUM > 0 {
		s.LeakFromNs = ip.StartNs
		if s.LeakFromNs == 0 {
			s.LeakFromNs = ip.TimeNs
		}
	}
	s.LeakN++
}

// leakK is the reference value of the leak CUSUM.
const leakK = 0.5

// AddSeries scans new raw samples of the tank's level for the feed status
// and the stuck check: the time of the newest sample, gaps longer than
// opt.GapLimit (see Feed), the reading quantum, and the current run of
// bit-identical readings (stuck), which a gap ends as a changed reading
// does, so that no run spans a stretch without samples; a run that ends
// after meeting the stuck rule (see stuckRule, evaluated with the records
// known at this call) is kept in StuckRuns. Samples at or
// before the last one seen are skipped, so overlapping windows are harmless.
func (s *State) AddSeries(ser *model.Series, opt Options) {
	opt = opt.withDefaults()
	ss := &s.Sensor
	lim := s.stuckRule(opt)
	for i, t := range ser.TimeNs {
		if t <= ss.LastSampleNs {
			continue
		}
		h := ser.HeadM[i]
		if ss.LastSampleNs > 0 {
			gap := t-ss.LastSampleNs > int64(opt.GapLimit)
			if gap {
				ss.Gaps = appendCapped(ss.Gaps, Gap{StartNs: ss.LastSampleNs, EndNs: t}, maxGaps)
			}
			// A stretch without samples is a gap, not a flat reading: it
			// ends the run of identical readings as a change does (the run
			// before it is judged on its own samples and duration).
			if gap || h != ss.LastHeadM {
				if lim.stuckNow(ss.FlatRunN, time.Duration(ss.LastSampleNs-ss.FlatSinceNs), opt) {
					ss.StuckRuns = appendCapped(ss.StuckRuns, StuckRun{StartNs: ss.FlatSinceNs, EndNs: ss.LastSampleNs, N: ss.FlatRunN}, maxStuckRuns)
				}
				if d := math.Abs(h - ss.LastHeadM); h != ss.LastHeadM && d > quantumFloorM && (ss.QuantumM == 0 || d < ss.QuantumM) {
					ss.QuantumM = d
				}
				ss.FlatSinceNs, ss.FlatRunN = t, 0
			}
		} else {
			ss.FlatSinceNs, ss.FlatRunN = t, 0
		}
		ss.FlatRunN++
		ss.LastSampleNs, ss.LastHeadM = t, h
	}
}

// Reset records maintenance at time at. "cleaned", "repaired" and
// "replaced" restart the outlet baseline (and the idle leak statistics) from
// that time: drains before it are ignored and the next BaselineDrains
// accepted drains form the new baseline. "sensor-calibrated" restarts the
// sensor checks. Any other action is an error.
func (s *State) Reset(at time.Time, action string) error {
	ns := at.UnixNano()
	switch action {
	case "cleaned", "repaired", "replaced":
		s.restartBaseline(ns, action)
	case "sensor-calibrated":
		s.LastAction = action
		s.Sensor.EpochNs = ns
		s.Sensor.Recs = nil
		s.Sensor.Gaps = nil
		s.Sensor.StuckRuns = nil
		s.Sensor.FlatSinceNs = max(s.Sensor.FlatSinceNs, ns)
	default:
		return fmt.Errorf("detect: tank %s: unknown maintenance action %q (want cleaned, repaired, replaced or sensor-calibrated)", s.Tank, action)
	}
	return nil
}

// Commission records an accepted commissioning drain test over [from,
// until]: the outlet baseline restarts at from (as Reset does for a
// replaced outlet), so the test's drains are its first drains, and when it
// is set the later baseline drains are compared with the test's
// (TestComparison).
func (s *State) Commission(from, until time.Time) error {
	if !until.After(from) {
		return fmt.Errorf("detect: tank %s: commissioning test ends at %s, not after its start %s", s.Tank, until.Format(time.RFC3339), from.Format(time.RFC3339))
	}
	s.restartBaseline(from.UnixNano(), "commissioned")
	s.CommissionUntilNs = until.UnixNano()
	return nil
}

// PriorBaseline is what a cleaning or repair left of the baseline before
// it: the reference ln K, its between-drain variance S2 (floored at
// MinScatter^2) from N drains, and the maintenance's time and action.
type PriorBaseline struct {
	LnK    float64 `json:"ln_k"`
	S2     float64 `json:"s2"`
	N      int     `json:"n"`
	AtNs   int64   `json:"at_ns"`
	Action string  `json:"action"`
	// Exponent and HRefM: the prior reference compared K at this
	// exponent and head (Reference.Exponent); later drains are restated
	// the same way before the comparison. 0: K as fitted.
	Exponent float64 `json:"exponent,omitempty"`
	HRefM    float64 `json:"h_ref_m,omitempty"`
}

// restoredAlpha is the false-alarm probability of the check that a
// cleaning or repair restored the outlet, per maintenance record: it is
// re-made as each of the first BaselineDrains drains after it arrives, at
// restoredAlpha/BaselineDrains each (Bonferroni).
const restoredAlpha = 0.001

// restoredCheck compares the first BaselineDrains drains after a cleaning
// or repair (at least 3) with the baseline before it (Prior), one-sided
// for a K still low: Welch's t (Welch 1947, "The generalization of
// 'Student's' problem when several different population variances are
// involved", Biometrika 34),
//
//	t = (mean_a - LnK_b) / sqrt(s_a^2/n_a + S2_b/N_b),
//
// s_a floored at MinScatter, with the Welch-Satterthwaite degrees of
// freedom, p = F_t(t). In the returned comparison TestLnK is the prior
// ln K and BaseLnK the mean after the maintenance.
func (s *State) restoredCheck(opt Options) (TestComparison, bool) {
	p := s.Prior
	if p == nil || p.N < 2 {
		return TestComparison{}, false
	}
	opt = opt.withDefaults()
	var x []float64
	for _, pt := range s.Learn {
		if len(x) == opt.BaselineDrains {
			break
		}
		lnk := pt.LnK // the square-root K as fitted (restated below when the prior was)
		if pt.KRaw > 0 {
			lnk = math.Log(pt.KRaw)
		}
		if p.Exponent != 0 && pt.KdN != 0 && pt.KRaw > 0 {
			if k := model.KAtReference(model.Fit{KM25s: pt.KRaw, KPerExponent: pt.KdN}, p.Exponent, p.HRefM); k > 0 && !math.IsInf(k, 0) {
				lnk = math.Log(k)
			}
		}
		x = append(x, lnk)
	}
	n := len(x)
	if n < 3 {
		return TestComparison{}, false
	}
	m := stat.Mean(x, nil)
	va := math.Max(stat.Variance(x, nil), opt.MinScatter*opt.MinScatter) / float64(n)
	vb := p.S2 / float64(p.N)
	t := (m - p.LnK) / math.Sqrt(va+vb)
	dof := (va + vb) * (va + vb) / (va*va/float64(n-1) + vb*vb/float64(p.N-1))
	nu := max(1, int(dof))
	pv := distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(nu)}.CDF(t)
	return TestComparison{TestN: p.N, BaseN: n, TestLnK: p.LnK, BaseLnK: m, T: t, DOF: nu, P: pv}, true
}

// restartBaseline forgets the outlet baseline and the idle leak statistics
// at ns: drains before it are ignored from now on. A cleaning or repair
// keeps the baseline it ends as Prior (or the one before, when no baseline
// formed in between); a replacement or commissioning drops it (a new
// outlet may well pass differently).
func (s *State) restartBaseline(ns int64, action string) {
	switch {
	case action != "cleaned" && action != "repaired":
		s.Prior = nil
	case s.Ref.Set && s.Ref.N >= 2:
		s.Prior = &PriorBaseline{LnK: s.Ref.LnK, S2: math.Max(s.Ref.M2/float64(s.Ref.DegreesOF), s.minScatter2), N: s.Ref.N,
			Exponent: s.Ref.Exponent, HRefM: s.Ref.HRefM}
	}
	if s.Prior != nil {
		s.Prior.AtNs, s.Prior.Action = ns, action
	}
	s.EpochNs = ns
	s.LastAction = action
	s.CommissionUntilNs = 0
	s.Ref = Reference{}
	s.Learn = nil
	s.CUSUM = CUSUM{}
	s.EWMA = EWMA{}
	s.Monitored = 0
	s.Points = nil
	s.Idle = nil
	s.LeakCUSUM, s.LeakN = 0, 0
	s.LastFitNs = max(s.LastFitNs, ns)
	s.LastIdleNs = max(s.LastIdleNs, ns)
}

// exponentDevRef is how far from 1/2 the median exponent of the baseline
// drains must be for K to be compared at the tank's exponent. Real free
// outlets show 0.5-0.65 (a coefficient drifting with the Reynolds number,
// sensor lag), a long tube or a valve in transitional flow more; below
// 0.02 the restatement changes K by well under the scatter of a fit.
const exponentDevRef = 0.02

// referenceExponent decides, from the baseline drains, whether the tank's
// outlet departs from the square-root law consistently: the median
// exponent n_b of the baseline fits (at least 3 with one) is at least
// exponentDevRef from 1/2. Then the reference head is the median mid-drain
// head and every baseline point's K is restated at (n_b, h_ref) by
// model.KAtReference, as AddFit does for every later drain, so that
// partial and full drains of a healthy outlet agree. It returns n_b and
// h_ref, or zeros when K stays as fitted.
func (s *State) referenceExponent() (nb, hRefM float64) {
	var ns, hs []float64
	for _, p := range s.Learn {
		if p.Exp != 0 && p.KdN != 0 && p.HMidM > 0 {
			ns = append(ns, p.Exp)
			hs = append(hs, p.HMidM)
		}
	}
	if len(ns) < 3 || len(ns) < len(s.Learn)/2 {
		return 0, 0
	}
	nb = median(ns)
	if math.Abs(nb-0.5) < exponentDevRef {
		return 0, 0
	}
	hRefM = median(hs)
	for i, p := range s.Learn {
		if p.KdN == 0 || !(p.KRaw > 0) {
			continue
		}
		k := model.KAtReference(model.Fit{KM25s: p.KRaw, KPerExponent: p.KdN}, nb, hRefM)
		if k > 0 && !math.IsInf(k, 0) {
			s.Learn[i].LnK = math.Log(k)
		}
	}
	return nb, hRefM
}

func nanZero(x float64) float64 {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return 0
	}
	return x
}
