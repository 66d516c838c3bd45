package scan

import (
	"encoding/json"
	"fmt"
	"math"
	"time"

	"drainsight/detect"
	"drainsight/model"
	"drainsight/store"
)

// Outcome is what one tank gave in one pass.
type Outcome struct {
	Tank    string
	Fits    []model.Fit
	Evals   []Evaluation // in time order; the last one is at the pass's now
	Samples int64
	Drains  int
	Err     error
	// Reset is set when maintenance records changed: the tank's findings
	// clear at once if absent.
	Reset bool
	// Gaps are the data gaps (stretches without samples longer than the
	// detection gap limit) that overlap this pass: the feed's status, shown
	// in the summary, never a finding.
	Gaps []detect.Gap
	// Seg counts what the segmenter saw and decided; Falls lists each
	// fall; FitFailed counts drains whose fit failed, FitFailedBy by reason.
	Seg         model.SegmentStats
	Falls       []model.Fall
	FitFailed   int
	FitFailedBy map[model.FitFailure]int
}

// Collect copies the run's counts into the outcome.
func (o *Outcome) Collect(r *Run) {
	if r == nil {
		return
	}
	o.Samples, o.Drains, o.Reset = r.Total, r.Drains, r.MaintChanged
	o.Seg, o.Falls, o.FitFailed, o.FitFailedBy = r.Seg.Stats(), r.Falls, r.FitErr, r.FitErrBy
}

// Finish evaluates a committed run at now: the evaluations made while it
// was fed, one at now, and the data gaps since the previous pass.
func (o *Outcome) Finish(r *Run, now time.Time) {
	o.Evals = append(r.Evals, Evaluate(r.Det, now, r.P.Detect))
	o.Gaps = r.Det.GapsBetween(time.Unix(0, r.PrevEvalNs), now)
}

// Feed returns the tank's feed status at the last evaluation.
func (o *Outcome) Feed() (detect.FeedStatus, bool) {
	if len(o.Evals) == 0 {
		return detect.FeedStatus{}, false
	}
	return o.Evals[len(o.Evals)-1].Feed, true
}

// FeedRecord is one tank's feed at the end of a pass: one line of
// feeds.jsonl and the feed status kept in the state file (schema in the
// README). It is the data path's condition, never a tank finding.
type FeedRecord struct {
	detect.FeedStatus
	// GapsInPass and LongestGapInPassS: the data gaps that overlap the pass
	// (since the tank's previous evaluation) and the longest of them, s.
	GapsInPass        int     `json:"gaps_in_pass"`
	LongestGapInPassS float64 `json:"longest_gap_in_pass_s"`
}

// FeedRecord returns the tank's feed record; ok is false for a tank that
// failed or was not evaluated.
func (o *Outcome) FeedRecord() (FeedRecord, bool) {
	fs, ok := o.Feed()
	if !ok || o.Err != nil {
		return FeedRecord{}, false
	}
	fs.SilentForS, fs.MissingShare24h, fs.SilentLimitS = Sig(fs.SilentForS), Sig(fs.MissingShare24h), Sig(fs.SilentLimitS)
	r := FeedRecord{FeedStatus: fs, GapsInPass: len(o.Gaps)}
	for _, g := range o.Gaps {
		r.LongestGapInPassS = max(r.LongestGapInPassS, time.Duration(g.EndNs-g.StartNs).Seconds())
	}
	r.LongestGapInPassS = Sig(r.LongestGapInPassS)
	return r, true
}

// PutFeeds stores each evaluated tank's feed record in the state file, for
// the report and status pages.
func PutFeeds(st *store.Store, outcomes []Outcome) error {
	feeds := map[string][]byte{}
	for i := range outcomes {
		r, ok := outcomes[i].FeedRecord()
		if !ok {
			continue
		}
		b, err := json.Marshal(r)
		if err != nil {
			return fmt.Errorf("tank %s: feed status: %w", outcomes[i].Tank, err)
		}
		feeds[outcomes[i].Tank] = b
	}
	if len(feeds) == 0 {
		return nil
	}
	return st.PutFeeds(feeds)
}

// Sig rounds x to 6 significant digits (outputs stay stable across
// platforms and readable); non-finite values become 0.
func Sig(x float64) float64 {
	if math.IsNaN(x) || math.IsInf(x, 0) || x == 0 {
		return 0
	}
	d := 5 - int(math.Floor(math.Log10(math.Abs(x))))
	p := math.Pow(10, float64(d))
	return math.Round(x*p) / p
}
