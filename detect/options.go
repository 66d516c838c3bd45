package detect

import (
	"math"
	"time"

	"drainsight/model"
)

// Options tunes the per-tank detector. The zero value means the documented
// defaults; withDefaults fills them.
type Options struct {
	// BaselineDrains is the number of accepted drains after commissioning
	// or maintenance that form the baseline before monitoring starts.
	// Default 8.
	BaselineDrains int
	// LearnDrains caps the size of the reference: until then every
	// in-control drain (|T| < 3, charts below half their limits) joins it,
	// self-starting style. Default 0: no cap (the false-alarm rate stays
	// exact; a cap freezes estimation error into the charts).
	LearnDrains int
	// DesignKM25s, when > 0, fixes the reference K (m^2.5/s) instead of the
	// baseline median; the scatter is still learned from the data.
	DesignKM25s float64
	// FalseAlarmYears is the mean interval between false outlet alarms on a
	// healthy tank, in years, shared by the outlet CUSUM, the outlet EWMA
	// and the idle leak chart (a third of the budget each; the union bound
	// makes the sum an upper limit). Default 10 (0.1 false findings per
	// tank-year).
	FalseAlarmYears float64
	// CUSUMK is the CUSUM reference value in standard deviations of z
	// (tuned to a shift of 2k). Default 0.5.
	CUSUMK float64
	// EWMALambda is the EWMA smoothing constant. Default 0.1.
	EWMALambda float64
	// MaintenanceFraction is the fraction of the baseline K at which the
	// outlet needs cleaning; forecasts aim at it. Default 0.8.
	MaintenanceFraction float64
	// MinQuality is the lowest fit grade used for the outlet statistics.
	// Default model.QualityB (A and B used).
	MinQuality model.Quality
	// MinScatter is the floor on the between-drain scatter tau of ln K.
	// Default 0.005 (0.5 %), common practice for fitted orifice constants
	// (Cd alone drifts about 1 % over a drain's head range).
	MinScatter float64
	// TrendDrains is the most recent drains used for Mann-Kendall and
	// Theil-Sen. Default 60.
	TrendDrains int
	// TrendAlpha is the significance level of the trend test used to call a
	// restriction gradual and to forecast. Default 0.05.
	TrendAlpha float64

	// GapLimit: a step between samples longer than this is a gap: the
	// stretch without samples is the feed's condition (see Feed), a flat run
	// of readings never spans it, and while one is in progress findings are
	// withheld. Default 15 min.
	GapLimit time.Duration
	// SilentLimit: a feed without samples for longer than this is silent
	// and a feed notice goes out (once, and once when it comes back).
	// Default 4 h (see DefaultSilentLimit).
	SilentLimit time.Duration
	// ReadLag: data younger than this are not read yet (the InfluxDB settle
	// delay), so feed ages count from now minus ReadLag. Default 0.
	ReadLag time.Duration
	// StuckAfter: bit-identical readings for this long mean a stuck
	// sensor while no noise estimate exists yet (no segment records); once
	// one does, the stuck rule derives from the sensor's noise and quantum
	// (see stuckRule). Default 12 h.
	StuckAfter time.Duration
	// StuckMin is the shortest flat run reported as stuck under the derived
	// rule, whatever the sample count. Default 30 min.
	StuckMin time.Duration
	// NoiseFactor is the rise in level noise (idle NoiseM or fit SigmaM,
	// recent median over baseline median) that counts as a noisy sensor.
	// Default 2.
	NoiseFactor float64
	// SpikeFactor is the rise in the spike rate that counts. Default 3.
	SpikeFactor float64
	// DriftM is the shift of the empty-tank reading (EmptyHeadM on complete
	// drains) that counts as sensor drift, m. Default 0.01.
	DriftM float64
	// EvalInterval is the time between evaluations of a tank (the scan
	// period); with FalseAlarmYears it sets the default SensorAlpha.
	// Default 15 min.
	EvalInterval time.Duration
	// SensorAlpha is the per-evaluation significance level of each of the
	// three sensor tests with a probability model (stuck, noise, spikes).
	// Default: one false sensor finding per FalseAlarmYears per tank, split
	// in thirds over the evaluations, α = EvalInterval / (3 ×
	// FalseAlarmYears × 1 year) (9.5e-7 at 15 min and 10 years).
	SensorAlpha float64
}

func (o Options) withDefaults() Options {
	if o.BaselineDrains <= 0 {
		o.BaselineDrains = 8
	}
	if o.LearnDrains < 0 {
		o.LearnDrains = 0
	}
	if o.LearnDrains > 0 {
		o.LearnDrains = max(o.LearnDrains, o.BaselineDrains)
	}
	if o.FalseAlarmYears <= 0 {
		o.FalseAlarmYears = 10
	}
	if o.CUSUMK <= 0 {
		o.CUSUMK = 0.5
	}
	if o.EWMALambda <= 0 || o.EWMALambda > 1 {
		o.EWMALambda = 0.1
	}
	if o.MaintenanceFraction <= 0 || o.MaintenanceFraction >= 1 {
		o.MaintenanceFraction = 0.8
	}
	if o.MinQuality == "" {
		o.MinQuality = model.QualityB
	}
	if o.MinScatter <= 0 {
		o.MinScatter = 0.005
	}
	if o.TrendDrains <= 0 {
		o.TrendDrains = 60
	}
	if o.TrendAlpha <= 0 || o.TrendAlpha >= 1 {
		o.TrendAlpha = 0.05
	}
	if o.GapLimit <= 0 {
		o.GapLimit = 15 * time.Minute
	}
	if o.SilentLimit <= 0 {
		o.SilentLimit = DefaultSilentLimit
	}
	if o.ReadLag < 0 {
		o.ReadLag = 0
	}
	if o.StuckAfter <= 0 {
		o.StuckAfter = 12 * time.Hour
	}
	if o.NoiseFactor <= 1 {
		o.NoiseFactor = 2
	}
	if o.SpikeFactor <= 1 {
		o.SpikeFactor = 3
	}
	if o.DriftM <= 0 {
		o.DriftM = 0.01
	}
	if o.StuckMin <= 0 {
		o.StuckMin = stuckMinDuration
	}
	if o.EvalInterval <= 0 {
		o.EvalInterval = 15 * time.Minute
	}
	if o.SensorAlpha <= 0 || o.SensorAlpha >= 1 {
		o.SensorAlpha = sensorAlpha(o.FalseAlarmYears, o.EvalInterval)
	}
	return o
}

// DefaultSilentLimit is the default Options.SilentLimit. Routine data gaps
// (a logger restart, a network outage) last minutes to a few hours and end by
// themselves; a feed still silent after 4 h, half a control-room shift, is a
// broken data path someone has to restore, and has already lost one to a few
// drains at 1-6 drains a day. Level safety is the control system's own
// alarm, not drainsight's, so there is no reason to page sooner.
const DefaultSilentLimit = 4 * time.Hour

// qualityRank orders the grades, A best.
// Accepts reports whether the detector takes fit f as a drain of the
// outlet (AddFit's rule): graded at least MinQuality, with a finite
// positive K.
func (o Options) Accepts(f model.Fit) bool {
	o = o.withDefaults()
	return qualityRank(f.Quality) >= qualityRank(o.MinQuality) && f.KM25s > 0 && !math.IsInf(f.KM25s, 0)
}

func qualityRank(q model.Quality) int {
	switch q {
	case model.QualityA:
		return 3
	case model.QualityB:
		return 2
	case model.QualityC:
		return 1
	}
	return 0
}

// year is the Julian year used for rates.
const year = 365.25 * 24 * time.Hour

// sensorAlpha is the default per-evaluation level of each sensor test: the
// sensor budget of one false finding per falseAlarmYears split in thirds
// over the evaluations of those years (a union bound).
func sensorAlpha(falseAlarmYears float64, every time.Duration) float64 {
	evals := falseAlarmYears * float64(year) / float64(every)
	return math.Min(0.5, 1/(3*evals))
}
