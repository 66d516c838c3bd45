package model

import (
	"math"
	"time"
)

// StandardGravity is g_n, exact by definition (3rd CGPM, 1901), in m/s^2.
const StandardGravity = 9.80665

// Sqrt2g is sqrt(2 g_n) in m^0.5/s, the factor between K and Cd*a.
var Sqrt2g = math.Sqrt(2 * StandardGravity)

// Series is one tank's level history, converted to head above the outlet.
//
// TimeNs holds Unix nanoseconds, strictly increasing. HeadM holds the head
// above the outlet datum in metres; it is negative when the liquid is below
// the outlet. InflowM3s is nil when the tank has no inflow meter, otherwise it
// has the same length as TimeNs and holds the metered inflow in m^3/s at each
// sample time (sample-and-hold from the meter's own timestamps).
type Series struct {
	Tank      string
	TimeNs    []int64
	HeadM     []float64
	InflowM3s []float64
	// SubmergedM is nil when the outlet discharges freely. For an outlet
	// that discharges into another vessel (a tank in cascade, a basin) it
	// holds, per sample, that vessel's liquid level above this outlet, m
	// (negative: below the outlet, a free discharge; NaN: not known then).
	SubmergedM []float64
}

// Len returns the number of samples.
func (s *Series) Len() int { return len(s.TimeNs) }

// Append adds one sample. The caller keeps TimeNs strictly increasing.
func (s *Series) Append(tNs int64, headM float64) {
	s.TimeNs = append(s.TimeNs, tNs)
	s.HeadM = append(s.HeadM, headM)
}

// SegmentKind tells what the tank was doing during a segment.
type SegmentKind int

const (
	// Drain is a sustained fall consistent with gravity outflow through the outlet.
	Drain SegmentKind = iota + 1
	// Idle is a period with the outlet shut and no inflow: the level should be flat.
	Idle
	// Fill is a period of rising level (inflow); it is never fitted.
	Fill
)

func (k SegmentKind) String() string {
	switch k {
	case Drain:
		return "drain"
	case Idle:
		return "idle"
	case Fill:
		return "fill"
	}
	return "unknown"
}

// Segment is a piece of one tank's history cut out by the Segmenter. It owns a
// copy of its samples so that it can be fitted after the series is gone.
//
// For a Drain, the valve-opening transient and the empty tail are already
// trimmed from TimeNs/HeadM; RawStartNs/RawEndNs bound the whole fall as seen.
// Complete is true when the drain ran down to the outlet (the empty plateau was
// seen); EmptyHeadM is then the median reading on that plateau (m), which a
// healthy sensor reports as about zero and a drifting one does not.
type Segment struct {
	Tank       string
	Kind       SegmentKind
	TimeNs     []int64
	HeadM      []float64
	InflowM3s  []float64 // nil without an inflow meter
	SubmergedM []float64 // nil for a free outlet: the receiving level above the outlet, m (see Series)
	RawStartNs int64
	RawEndNs   int64
	Complete   bool
	EmptyHeadM float64 // NaN unless Complete
	Spikes     int     // samples rejected as spikes by the segmenter
	GapCount   int     // gaps longer than the segmenter's gap limit inside the segment
}

// Start returns the time of the first kept sample.
func (s *Segment) Start() time.Time { return time.Unix(0, s.TimeNs[0]).UTC() }

// End returns the time of the last kept sample.
func (s *Segment) End() time.Time { return time.Unix(0, s.TimeNs[len(s.TimeNs)-1]).UTC() }

// Quality grades a fit for detection: A and B are used, C is shown but given
// little weight, Reject is never used for the outlet statistics.
type Quality string

const (
	QualityA      Quality = "A"
	QualityB      Quality = "B"
	QualityC      Quality = "C"
	QualityReject Quality = "reject"
)

// Fit is the outcome of fitting the outlet constant to one drain.
//
// KM25s is K in m^2.5/s with its standard error KSEM25s and the 95 % interval
// [KLo95, KHi95]. SigmaM is the residual standard deviation of the level (m).
// Exponent is n of q ∝ h^n fitted on the same drain (0.5 for a free orifice)
// with its standard error. DurbinWatson is the residual whiteness statistic
// (about 2 for white residuals). DatumM is the datum offset estimated when the
// outlet elevation is unknown (0 otherwise). Method names the estimator that
// produced K ("wls", "nls", "inflow").
type Fit struct {
	Tank          string
	StartNs       int64
	EndNs         int64
	N             int
	Outliers      int
	H0M           float64 // fitted head at the first kept sample, m
	H1M           float64 // fitted head at the last kept sample, m
	KM25s         float64
	KSEM25s       float64
	KLo95M25s     float64
	KHi95M25s     float64
	SigmaM        float64
	R2            float64
	Exponent      float64
	ExponentSE    float64
	KPerExponent  float64 // dK/dn of the model q = K_n h^n on this drain near n = 1/2 (see KAtReference); NaN when not computed
	DurbinWatson  float64
	ResidualRho   float64 // lag-1 autocorrelation of the residuals, bias-corrected when significant; NaN when not computed
	EffectiveN    int     // samples' worth of independent information after the serial correlation; N when white
	DatumM        float64
	DatumFitted   bool // DatumM was estimated (outlet elevation unknown)
	Method        string
	Quality       Quality
	QualityReason string  // why the grade is below A; empty for A
	CdAM2         float64 // effective outlet area K/sqrt(2g), m^2
	Cd            float64 // K/(a sqrt(2g)) when the outlet diameter is known, else NaN
	Complete      bool
	EmptyHeadM    float64 // copied from the segment; NaN unless Complete
	Gaps          int     // data gaps inside the drain, copied from the segment
}

// IdleFit summarises an idle period: the level should be flat, and a fall
// that scales with sqrt(head) is a leak through the shell or a passing valve.
//
// RateMs is the mean dh/dt (m/s, negative when falling) with its standard
// error; LeakKM25s is the leak constant of A dh/dt = -K_leak sqrt(h) fitted
// over the period with its standard error (it may be negative for a rise).
// NoiseM is the robust (MAD-based) scatter of the detrended level, FlatRun the
// longest run of bit-identical readings in samples.
type IdleFit struct {
	Tank        string
	StartNs     int64
	EndNs       int64
	N           int
	MeanHeadM   float64
	RateMs      float64
	RateSEMs    float64
	LeakKM25s   float64
	LeakKSEM25s float64
	NoiseM      float64
	FlatRun     int
	Spikes      int
	GapCount    int
}
