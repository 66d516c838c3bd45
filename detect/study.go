package detect

import (
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"time"

	"drainsight/model"
)

// Study fault names.
const (
	FaultHealthy            = "healthy"
	FaultRestrictionAbrupt  = "restriction_abrupt"
	FaultRestrictionGradual = "restriction_gradual"
	FaultExcessOutflow      = "excess_outflow"
	FaultTankLeak           = "tank_leak"
)

// StudyOptions configures the detection study. The zero value means the
// defaults given per field.
type StudyOptions struct {
	Tanks         int       // simulated tanks per (fault, magnitude) cell; default 200
	Seed          uint64    // default 1
	Faults        []string  // default all four fault kinds
	MagnitudesPct []float64 // default 5, 10, 20, 30, 50
	Tau           float64   // between-drain scatter of ln K; default 0.02
	SERel         float64   // relative standard error of one fit; default 0.005
	BaselineDays  float64   // days of healthy history before the earliest onset; default 60
	HorizonDays   float64   // days watched after the onset; default 180
	RampDays      float64   // a gradual restriction reaches its full size after this; default 90
	HealthyTanks  int       // healthy tanks for the false-alarm row; default 200
	HealthyYears  float64   // years simulated per healthy tank; default 2
	SettleDrains  int       // drains after the first finding at which the settled class is read; default 20
	Detector      Options   // detector options (zero value: defaults)
}

func (o StudyOptions) withDefaults() StudyOptions {
	if o.Tanks <= 0 {
		o.Tanks = 200
	}
	if o.Seed == 0 {
		o.Seed = 1
	}
	if len(o.Faults) == 0 {
		o.Faults = []string{FaultRestrictionAbrupt, FaultRestrictionGradual, FaultExcessOutflow, FaultTankLeak}
	}
	if len(o.MagnitudesPct) == 0 {
		o.MagnitudesPct = []float64{5, 10, 20, 30, 50}
	}
	if o.Tau <= 0 {
		o.Tau = 0.02
	}
	if o.SERel <= 0 {
		o.SERel = 0.005
	}
	if o.BaselineDays <= 0 {
		o.BaselineDays = 60
	}
	if o.HorizonDays <= 0 {
		o.HorizonDays = 180
	}
	if o.RampDays <= 0 {
		o.RampDays = 90
	}
	if o.HealthyTanks <= 0 {
		o.HealthyTanks = 200
	}
	if o.HealthyYears <= 0 {
		o.HealthyYears = 2
	}
	if o.SettleDrains <= 0 {
		o.SettleDrains = 20
	}
	return o
}

// StudyRow is one cell of the study. For fault rows: the share of tanks
// detected within the horizon, the median delay from onset to the first
// finding (drains and days), the share of detected tanks whose first finding
// had the right kind (and subtype for restrictions), and the median delay of
// a CUSUM told the true shift in advance (k = δ/2 with δ the full shift in
// units of the true scatter, true baseline, same in-control ARL, started at
// the onset; not given for the gradual fault, which has no single shift).
// For the healthy row: false findings per tank-year.
type StudyRow struct {
	Fault             string
	MagnitudePct      float64
	Tanks             int
	DetectedPct       float64
	MedianDelayDrains float64
	MedianDelayDays   float64
	CorrectPct        float64
	SettledPct        float64 // share of detected tanks classified right SettleDrains drains after the first finding
	OracleDelayDrains float64
	FalsePerTankYear  float64
	TankYears         float64
	// Healthy row: routine data gaps simulated per tank-year and the feed
	// notices they gave (a feed turning silent past Options.SilentLimit at
	// a 15 min scan; each is followed by one notice that it is back);
	// neither is a tank finding.
	GapsPerTankYear        float64
	FeedNoticesPerTankYear float64
	FalseBeforeOnset       int // false findings before the onset in fault runs
}

// Study simulates tank histories and runs the detector on them. Each tank
// drains 1-3 times a day (its own rate, uniform), with
// K_i = K0 (1 + shift(t)) exp(τ ε_i) and a fit error of SERel; between
// drains an idle period at a random head reports a leak constant with a
// standard error of 0.2 % of K0. Faults start 0-30 days after BaselineDays:
// a step (abrupt restriction, excess outflow), a linear fall reaching the
// full size after RampDays (gradual restriction), or a tank leak (drains see
// K rise by the magnitude and idle periods a leak constant of that size).
// The detector is evaluated once a day; after a false finding the charts are
// restarted, as after an inspection that found nothing. The healthy tanks
// also have a raw level feed with routine data gaps (see studyHealthy),
// looked at every 15 min for feed notices. Deterministic for a given Seed.
func Study(opt StudyOptions) []StudyRow {
	opt = opt.withDefaults()
	var rows []StudyRow
	for fi, fault := range opt.Faults {
		for mi, m := range opt.MagnitudesPct {
			rows = append(rows, studyCell(opt, fault, m/100, uint64(fi*100+mi+1)))
		}
	}
	rows = append(rows, studyHealthy(opt))
	return rows
}

type simTank struct {
	rng        *rand.Rand
	k0         float64
	ratePerDay float64
	tNs        int64
	drains     int
}

const studyStart = int64(1_700_000_000) * 1e9

func newSimTank(seed, cell, i uint64) *simTank {
	r := rand.New(rand.NewPCG(seed, cell<<32|i))
	return &simTank{rng: r, k0: 1e-3 * math.Exp(r.Float64()-0.5), ratePerDay: 1 + 2*r.Float64(), tNs: studyStart}
}

// step advances to the next drain and returns its fit and the idle fit that
// preceded it; mult is the true K multiplier, leak the true leak constant.
func (st *simTank) step(opt StudyOptions, mult func(int64) float64, leak func(int64) float64) (model.IdleFit, model.Fit) {
	r := st.rng
	gap := (0.5 + r.Float64()) / st.ratePerDay * nsPerDay
	idleEnd := st.tNs + int64(gap*0.8)
	head := 0.3 + 2.7*r.Float64()
	const area = 2.0
	lk := leak(idleEnd)
	lse := 0.002 * st.k0
	lkObs := lk + lse*r.NormFloat64()
	rateSE := lse * math.Sqrt(head) / area
	idle := model.IdleFit{Tank: "sim", StartNs: st.tNs + int64(gap*0.1), EndNs: idleEnd, N: 200,
		MeanHeadM: head, RateMs: -lkObs * math.Sqrt(head) / area, RateSEMs: rateSE,
		LeakKM25s: lkObs, LeakKSEM25s: lse, NoiseM: 0.001, FlatRun: 3}
	st.tNs += int64(gap)
	k := st.k0 * mult(st.tNs) * math.Exp(opt.Tau*r.NormFloat64())
	kObs := k * (1 + opt.SERel*r.NormFloat64())
	span := 1800 * 1e-3 / kObs
	f := model.Fit{Tank: "sim", StartNs: st.tNs - int64(span*1e9), EndNs: st.tNs, N: 300,
		KM25s: kObs, KSEM25s: opt.SERel * kObs, Quality: model.QualityA, SigmaM: 0.001,
		Complete: true, EmptyHeadM: 0.001 * r.NormFloat64(), Exponent: 0.5}
	st.drains++
	return idle, f
}

// restartCharts restarts the statistics after a finding was inspected.
func (s *State) restartCharts() {
	s.CUSUM.Reset(0)
	s.EWMA.Value = 0
	s.LeakCUSUM = 0
}

func outletKinds(fs []Finding) []Finding {
	var o []Finding
	for _, f := range fs {
		if f.Kind != KindSensorFault {
			o = append(o, f)
		}
	}
	return o
}

func studyCell(opt StudyOptions, fault string, m float64, cell uint64) StudyRow {
	row := StudyRow{Fault: fault, MagnitudePct: 100 * m, Tanks: opt.Tanks}
	var delaysD, delaysN, oracle []float64
	detected, correct, settled := 0, 0, 0
	dopt := opt.Detector.withDefaults()
	for i := 0; i < opt.Tanks; i++ {
		st := newSimTank(opt.Seed, cell, uint64(i))
		onset := studyStart + int64((opt.BaselineDays+30*st.rng.Float64())*nsPerDay)
		end := onset + int64(opt.HorizonDays*nsPerDay)
		mult := func(t int64) float64 {
			if t < onset {
				return 1
			}
			switch fault {
			case FaultRestrictionAbrupt:
				return 1 - m
			case FaultRestrictionGradual:
				return 1 - m*math.Min(1, float64(t-onset)/(opt.RampDays*nsPerDay))
			}
			return 1 + m
		}
		leak := func(t int64) float64 {
			if fault == FaultTankLeak && t >= onset {
				return m * st.k0
			}
			return 0
		}
		s := NewState(fmt.Sprintf("sim-%d", i))
		// Oracle CUSUM, known baseline and shift, started at the onset.
		sigma := math.Sqrt(opt.Tau*opt.Tau + opt.SERel*opt.SERel)
		delta := math.Abs(math.Log(mult(end))) / sigma
		sign := 1.0
		if mult(end) < 1 {
			sign = -1
		}
		ok := delta / 2
		oh := cusumH(ok, s.chartARL0(dopt)) // rounded ARL0 keeps the cache small
		var oc float64
		oracleDone := fault == FaultRestrictionGradual // no single shift to tell it
		drainsAtOnset := -1
		nextEval := studyStart + int64(nsPerDay)
		for st.tNs < end {
			idle, f := st.step(opt, mult, leak)
			s.AddIdle(idle, dopt)
			s.AddFit(f, dopt)
			if f.EndNs >= onset {
				if drainsAtOnset < 0 {
					drainsAtOnset = st.drains - 1
				}
				if !oracleDone {
					z := sign * (math.Log(f.KM25s) - math.Log(st.k0)) / sigma
					oc = math.Max(0, oc+z-ok)
					if oc > oh {
						oracleDone = true
						oracle = append(oracle, float64(st.drains-drainsAtOnset))
					}
				}
			}
			if st.tNs < nextEval {
				continue
			}
			now := nsTime(nextEval)
			nextEval += int64(nsPerDay)
			fs := outletKinds(s.Evaluate(now, dopt))
			if len(fs) == 0 {
				continue
			}
			if now.UnixNano() < onset {
				row.FalseBeforeOnset++
				s.restartCharts()
				continue
			}
			detected++
			delaysD = append(delaysD, float64(now.UnixNano()-onset)/nsPerDay)
			delaysN = append(delaysN, float64(st.drains-drainsAtOnset))
			if classifiedRight(fs[0], fault) {
				correct++
			}
			// The class the finding settles on: keep draining without a
			// restart and read it again SettleDrains drains later.
			for range opt.SettleDrains {
				idle, f := st.step(opt, mult, leak)
				s.AddIdle(idle, dopt)
				s.AddFit(f, dopt)
			}
			if fs := outletKinds(s.Evaluate(nsTime(st.tNs), dopt)); len(fs) > 0 && classifiedRight(fs[0], fault) {
				settled++
			}
			break
		}
	}
	row.DetectedPct = 100 * float64(detected) / float64(opt.Tanks)
	row.MedianDelayDays = median(delaysD)
	row.MedianDelayDrains = median(delaysN)
	if detected > 0 {
		row.CorrectPct = 100 * float64(correct) / float64(detected)
		row.SettledPct = 100 * float64(settled) / float64(detected)
	}
	row.OracleDelayDrains = median(oracle)
	return row
}

func classifiedRight(f Finding, fault string) bool {
	switch fault {
	case FaultRestrictionAbrupt:
		return f.Kind == KindRestriction && f.Subtype == SubAbrupt
	case FaultRestrictionGradual:
		return f.Kind == KindRestriction && f.Subtype == SubGradual
	case FaultExcessOutflow:
		return f.Kind == KindExcessOutflow
	case FaultTankLeak:
		return f.Kind == KindTankLeak
	}
	return false
}

// studyScanEvery is how often the healthy row looks at the feed: the
// default scan schedule (outputs.scan_schedule "*/15 * * * *"), which is
// when a real feed notice would go out.
const studyScanEvery = int64(15 * time.Minute)

// studyHealthy runs the healthy tanks with a raw feed broken by routine data
// gaps (routineFeed). The feed is looked at every studyScanEvery: a feed
// notice is counted when it turns silent (each is followed by one "back"
// notice when samples return). Tank findings are evaluated once a day and
// also at the first scan after each gap ends, when findings withheld during
// the gap would surface; a tank finding is never raised while the feed is
// in a gap (Evaluate withholds).
func studyHealthy(opt StudyOptions) StudyRow {
	row := StudyRow{Fault: FaultHealthy, Tanks: opt.HealthyTanks}
	dopt := opt.Detector.withDefaults()
	falseN := 0
	var years float64
	one := func(int64) float64 { return 1 }
	zero := func(int64) float64 { return 0 }
	notices, gaps := 0, 0
	for i := 0; i < opt.HealthyTanks; i++ {
		st := newSimTank(opt.Seed, 999_999, uint64(i))
		s := NewState(fmt.Sprintf("healthy-%d", i))
		end := studyStart + int64(opt.HealthyYears*365.25*nsPerDay)
		nextScan := studyStart + studyScanEvery
		feed := newRoutineFeed(opt.Seed, uint64(i))
		silent, withheld := false, false
		evaluate := func(now time.Time) {
			if len(s.Evaluate(now, dopt)) > 0 {
				falseN++
				s.restartCharts()
			}
		}
		for st.tNs < end {
			idle, f := st.step(opt, one, zero)
			s.AddIdle(idle, dopt)
			s.AddFit(f, dopt)
			for ; nextScan <= st.tNs && nextScan <= end; nextScan += studyScanEvery {
				now := nsTime(nextScan)
				s.AddSeries(feed.until(nextScan), dopt)
				fs := s.Feed(now, dopt)
				if fs.State == FeedSilent && !silent {
					notices++
				}
				silent = fs.State == FeedSilent
				daily := (nextScan-studyStart)%int64(nsPerDay) == 0
				if daily || withheld && !fs.Withholds() {
					evaluate(now)
				}
				withheld = fs.Withholds()
			}
		}
		gaps += feed.gaps
		years += opt.HealthyYears
	}
	row.TankYears = years
	row.FalsePerTankYear = float64(falseN) / years
	row.FeedNoticesPerTankYear = float64(notices) / years
	row.GapsPerTankYear = float64(gaps) / years
	return row
}

// routineFeed is the raw level feed of a healthy study tank: a sample every
// 5 min of a steady level with 2 mm noise read in 1 mm counts (so readings
// repeat now and then, as real ones do, across gaps too), broken by routine
// data gaps, one per 12 days on average (exponential spacing), lasting 10 min
// to 8 h (log-uniform): logger restarts and network outages. The rate and
// range are the project's requirement (issue 9); the shapes of the
// distributions are common practice for such outages.
type routineFeed struct {
	rng    *rand.Rand
	tNs    int64
	gapAt  int64
	gapEnd int64
	gaps   int
}

const (
	routineStepNs  = int64(5 * time.Minute)
	routineCountsM = 0.001
)

func newRoutineFeed(seed, i uint64) *routineFeed {
	f := &routineFeed{rng: rand.New(rand.NewPCG(seed^0x9e3779b9, 7_000_000+i)), tNs: studyStart}
	f.nextGap()
	return f
}

func (f *routineFeed) nextGap() {
	f.gapAt = f.tNs + int64(f.rng.ExpFloat64()*12*nsPerDay)
	d := math.Exp(math.Log(10*60) + f.rng.Float64()*(math.Log(8*3600)-math.Log(10*60)))
	f.gapEnd = f.gapAt + int64(d*1e9)
}

// until returns the samples from the last call up to tNs.
func (f *routineFeed) until(tNs int64) *model.Series {
	ser := &model.Series{}
	for ; f.tNs < tNs; f.tNs += routineStepNs {
		if f.tNs >= f.gapAt {
			if f.tNs < f.gapEnd {
				continue
			}
			f.gaps++
			f.nextGap()
		}
		ser.Append(f.tNs, routineCountsM*math.Round((1+0.002*f.rng.NormFloat64())/routineCountsM))
	}
	return ser
}

// FormatStudyTable renders the study as a markdown table.
func FormatStudyTable(rows []StudyRow) string {
	var b strings.Builder
	b.WriteString("| fault | size % | tanks | detected % | median delay (drains) | median delay (days) | classified right % | right after settling % | oracle CUSUM delay (drains) | false before onset |\n")
	b.WriteString("|---|---|---|---|---|---|---|---|---|---|\n")
	var healthy []StudyRow
	for _, r := range rows {
		if r.Fault == FaultHealthy {
			healthy = append(healthy, r)
			continue
		}
		fmt.Fprintf(&b, "| %s | %.0f | %d | %.1f | %s | %s | %.1f | %.1f | %s | %d |\n", r.Fault, r.MagnitudePct, r.Tanks,
			r.DetectedPct, fmtNum(r.MedianDelayDrains), fmtNum(r.MedianDelayDays), r.CorrectPct, r.SettledPct, fmtNum(r.OracleDelayDrains), r.FalseBeforeOnset)
	}
	if len(healthy) > 0 {
		b.WriteString("\n| healthy tanks | tank-years | false tank findings per tank-year | routine data gaps per tank-year | feed notices per tank-year |\n|---|---|---|---|---|\n")
		for _, r := range healthy {
			fmt.Fprintf(&b, "| %d | %.0f | %.3f | %.1f | %.2f |\n", r.Tanks, r.TankYears, r.FalsePerTankYear, r.GapsPerTankYear, r.FeedNoticesPerTankYear)
		}
	}
	return b.String()
}

func fmtNum(x float64) string {
	if math.IsNaN(x) {
		return "-"
	}
	return fmt.Sprintf("%.1f", x)
}
