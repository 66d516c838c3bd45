package scan

import (
	"bytes"
	"cmp"
	"encoding/gob"
	"fmt"
	"log/slog"
	"math"
	"slices"
	"sort"
	"strconv"
	"strings"
	"time"

	"drainsight/detect"
	"drainsight/model"
	"drainsight/store"
)

// MinLookback is the least a scan re-reads before a tank's committed time,
// so that the segmenter sees a drain still open at the boundary whole and has
// enough quiet data to estimate the noise (model.Segmenter.CommittedNs asks
// for at least 8 h and more than the longest drain). A site's influx.overlap
// may ask for more.
const MinLookback = 12 * time.Hour

// EncodeState and DecodeState keep the detector state as gob, which carries
// the NaN the statistics use for "not yet known" (JSON cannot).
func EncodeState(s SavedState) ([]byte, error) { return EncodeGob(s) }

// DecodeState decodes a blob of EncodeState.
func DecodeState(blob []byte, s *SavedState) error { return DecodeGob(blob, s) }

// EncodeGob and DecodeGob are the store's blob encoding for the program's
// own values (detector state, alert records): gob keeps NaN and needs no
// schema file.
func EncodeGob(v any) ([]byte, error) {
	var b bytes.Buffer
	err := gob.NewEncoder(&b).Encode(v)
	return b.Bytes(), err
}

// DecodeGob decodes a blob of EncodeGob.
func DecodeGob(blob []byte, v any) error {
	return gob.NewDecoder(bytes.NewReader(blob)).Decode(v)
}

// SavedState is the detector state blob kept in the store: the detector's
// own state plus the fingerprint of the maintenance records it has applied,
// so that a record added or removed later triggers a replay. Its layout
// version is the detector's (detect.StateVersion): Open rebuilds a state of
// another version from the stored fits.
type SavedState struct {
	Maintenance string        `json:"maintenance"`
	Detector    *detect.State `json:"detector"`
}

// Plan is what a Run needs to know about one tank: its physics and the
// options of each stage. The program builds it from the configuration.
type Plan struct {
	ID      string
	Tank    model.Tank
	Segment model.SegmentOptions
	Fit     model.FitOptions
	Detect  detect.Options
	// Lookback is re-read before the checkpoint beyond MinLookback (a
	// site's influx.overlap); 0 for files.
	Lookback time.Duration
	// Linked: the outlet discharges into another tank, whose level above
	// the outlet comes in Series.SubmergedM or from Run.Recv.
	Linked bool
	// WriteBack names the outbox sink that receives the tank's fits ("":
	// none): each commit queues its fits in its own transaction (see
	// Sender).
	WriteBack string
	// EventsSink, when set (SinkEvents), receives the fits of each commit
	// for the events file the same way: a pass killed after its commits
	// leaves them for the next pass's file.
	EventsSink string
}

// Run carries one tank through one pass: segmenter, fits, detector and the
// commits to the store. It is used by one goroutine at a time. The caller
// sets FromNs, LimitNs, Recv and Complete, feeds samples with Feed and
// commits with Commit; the exported counters and lists are what the pass
// gave.
type Run struct {
	P     *Plan
	Det   *detect.State
	Seg   *model.Segmenter
	st    *store.Store
	log   *slog.Logger
	cp    store.Checkpoint
	maint string
	fresh []model.Fit // fits not yet committed, in time order
	idles []model.IdleFit
	seen  int64 // samples pushed since the last commit

	// HadCheckpoint: the tank was scanned before.
	HadCheckpoint bool
	// Recv is the level of the tank the outlet discharges into, read from
	// its files; nil for a free outlet and for InfluxDB (whose windows
	// carry it in Series.SubmergedM).
	Recv *model.ReceivingLevel
	// Complete is set before the pass's final commit when the tank's
	// history is known to be complete (scan --final, or --now past its
	// last sample by more than the settle delay): the drain under way and
	// those within the settle delay are judged then (model.FlushFinal).
	Complete bool
	// FromNs: samples before it are not pushed (the previous pass has them).
	FromNs int64
	// LimitNs: no evaluation at or after it (the pass's now).
	LimitNs int64

	FitErr   int                      // drains whose fit failed
	FitErrBy map[model.FitFailure]int // FitErr by reason
	Drains   int                      // drains emitted and not rejected after their fit
	LastNs   int64                    // time of the last sample pushed in this run
	Falls    []model.Fall             // every fall decided in this run
	Total    int64                    // samples pushed in this run
	// PrevEvalNs is the evaluation time of the previous pass (its
	// checkpoint's UpdatedNs): history before it was evaluated already.
	PrevEvalNs int64
	// MaintChanged is set when maintenance records were added or removed
	// since the previous pass: the baseline restarted.
	MaintChanged bool
	// Evals are the daily evaluations the data crossed, in time order.
	Evals []Evaluation
	// cutNs is the next daily evaluation instant after the last sample
	// pushed (0 before the first).
	cutNs int64
}

// Open loads the tank's checkpoint and detector state (replaying the
// stored history if the maintenance records changed) and returns the run and
// the time from which samples must be pushed.
func Open(st *store.Store, p *Plan, log *slog.Logger) (*Run, int64, error) {
	r := &Run{P: p, st: st, log: log}
	id := p.ID
	cp, ok, err := st.Checkpoint(id)
	if err != nil {
		return nil, 0, err
	}
	r.cp, r.HadCheckpoint, r.PrevEvalNs = cp, ok, cp.UpdatedNs
	recs, err := st.Maintenance(id)
	if err != nil {
		return nil, 0, err
	}
	r.maint = MaintenanceFingerprint(recs)
	blob, err := st.DetectorState(id)
	if err != nil {
		return nil, 0, err
	}
	var saved SavedState
	if len(blob) > 0 {
		if err := DecodeState(blob, &saved); err != nil {
			return nil, 0, fmt.Errorf("stored detector state: %w", err)
		}
	}
	r.MaintChanged = saved.Detector != nil && saved.Maintenance != r.maint
	stale := saved.Detector != nil && saved.Detector.Version != detect.StateVersion
	if stale {
		// Written by another release: its fields may not mean what this
		// one reads. The stored fits and idle periods are the record.
		log.Warn("detector state of another layout rebuilt from the stored fits", "tank", id,
			"version", saved.Detector.Version, "want", detect.StateVersion)
	}
	if saved.Detector == nil || saved.Maintenance != r.maint || stale {
		if r.Det, err = Replay(st, p, recs); err != nil {
			return nil, 0, err
		}
	} else {
		r.Det = saved.Detector
	}
	opt := p.Segment
	if r.Det.Ref.Set && opt.OutletKM25s == 0 {
		opt.OutletKM25s = r.Det.Ref.KM25s // for the leak-rate test of falls while shut
	}
	from := int64(0)
	if ok {
		opt.EmitFromNs = cp.CommittedNs
		from = cp.CommittedNs - int64(max(MinLookback, p.Lookback))
	}
	r.Seg = model.NewSegmenter(&p.Tank, opt)
	return r, from, nil
}

// Replay rebuilds a detector state from the stored fits, idle periods and
// maintenance records, in time order.
func Replay(st *store.Store, p *Plan, recs []store.Maintenance) (*detect.State, error) {
	id := p.ID
	det := detect.NewState(id)
	fits, err := st.Fits(id, 0, 1<<62)
	if err != nil {
		return nil, err
	}
	idles, err := st.Idles(id, 0, 1<<62)
	if err != nil {
		return nil, err
	}
	type item struct {
		t    int64
		fit  *model.Fit
		idle *model.IdleFit
		m    *store.Maintenance
	}
	var items []item
	for i := range fits {
		items = append(items, item{t: fits[i].EndNs, fit: &fits[i]})
	}
	for i := range idles {
		items = append(items, item{t: idles[i].EndNs, idle: &idles[i]})
	}
	for i := range recs {
		items = append(items, item{t: recs[i].AtNs, m: &recs[i]})
	}
	slices.SortStableFunc(items, func(a, b item) int { return cmp.Compare(a.t, b.t) })
	for _, it := range items {
		switch {
		case it.fit != nil:
			det.AddFit(*it.fit, p.Detect)
		case it.idle != nil:
			det.AddIdle(*it.idle, p.Detect)
		case it.m.Action == store.ActionCommissioned && it.m.Test != nil:
			if err := det.Commission(time.Unix(0, it.m.AtNs).UTC(), time.Unix(0, it.m.Test.UntilNs).UTC()); err != nil {
				return nil, err
			}
		default:
			if err := det.Reset(time.Unix(0, it.m.AtNs).UTC(), string(it.m.Action)); err != nil {
				return nil, err
			}
		}
	}
	return det, nil
}

// MaintenanceFingerprint identifies a tank's maintenance records: the
// detector state keeps the one it has applied.
func MaintenanceFingerprint(recs []store.Maintenance) string {
	var b strings.Builder
	for _, m := range recs {
		b.WriteString(strconv.FormatUint(m.ID, 10))
		b.WriteByte('@')
		b.WriteString(strconv.FormatInt(m.AtNs, 10))
		b.WriteString(string(m.Action))
		b.WriteByte(';')
	}
	return b.String()
}

// Feed pushes samples (time order, any chunking) and evaluates the
// statistics at every UTC midnight the data cross that the previous pass did
// not evaluate, with the data before the midnight only.
func (r *Run) Feed(s *model.Series) {
	i, n := 0, s.Len()
	for i < n && s.TimeNs[i] < r.FromNs {
		i++
	}
	for n > i && s.TimeNs[n-1] >= r.LimitNs {
		n-- // samples after the pass's evaluation time wait for a later pass
	}
	for i < n {
		// Evaluate at every midnight the data have passed, gaps included.
		for r.cutNs != 0 && s.TimeNs[i] >= r.cutNs {
			if cut := r.cutNs; cut > r.PrevEvalNs && cut < r.LimitNs {
				at := time.Unix(0, cut).UTC()
				r.Evals = append(r.Evals, Evaluate(r.Det, at, r.P.Detect))
			}
			r.cutNs += int64(EvalEvery)
		}
		if r.cutNs == 0 {
			r.cutNs = NextEval(s.TimeNs[i])
		}
		j := i + sort.Search(n-i, func(k int) bool { return s.TimeNs[i+k] >= r.cutNs })
		part := &model.Series{Tank: s.Tank, TimeNs: s.TimeNs[i:j], HeadM: s.HeadM[i:j]}
		if s.InflowM3s != nil {
			part.InflowM3s = s.InflowM3s[i:j]
		}
		if s.SubmergedM != nil {
			part.SubmergedM = s.SubmergedM[i:j]
		}
		r.push(part)
		i = j
	}
}

// push feeds samples (time order) into the sensor checks and the segmenter,
// and fits whatever segments complete.
func (r *Run) push(s *model.Series) {
	if s.Len() == 0 {
		return
	}
	r.seen += int64(s.Len())
	r.Total += int64(s.Len())
	r.LastNs = s.TimeNs[s.Len()-1]
	r.Det.AddSeries(s, r.P.Detect)
	if !r.P.Linked {
		r.Seg.Push(s.TimeNs, s.HeadM, s.InflowM3s)
	} else {
		// The receiving level comes with the samples (InfluxDB: pulled in
		// the same window) or from the receiving tank's files; where it is
		// not known it is NaN, never a free outlet.
		sub := s.SubmergedM
		if sub == nil && r.Recv != nil {
			sub = r.Recv.At(s.TimeNs)
		}
		if sub == nil {
			sub = make([]float64, s.Len())
			for i := range sub {
				sub[i] = math.NaN()
			}
		}
		r.Seg.PushSubmerged(s.TimeNs, s.HeadM, s.InflowM3s, sub)
	}
	r.fitSegments(r.Seg.Take())
	r.takeFalls()
}

// takeFalls collects the falls the segmenter decided and lists each at
// debug level (scan -v): its times, drop and outcome.
func (r *Run) takeFalls() {
	for _, f := range r.Seg.TakeFalls() {
		r.Falls = append(r.Falls, f)
		r.log.Debug("fall", "tank", r.P.ID, "start", time.Unix(0, f.StartNs).UTC(), "end", time.Unix(0, f.EndNs).UTC(),
			"drop_m", strconv.FormatFloat(f.DropM, 'g', 6, 64), "outcome", f.Outcome.String())
	}
}

func (r *Run) fitSegments(segs []model.Segment) {
	for i := range segs {
		sg := &segs[i]
		switch sg.Kind {
		case model.Drain:
			r.Drains++
			f, err := model.FitDrain(&r.P.Tank, sg, r.P.Fit)
			if err != nil {
				r.FitErr++
				if r.FitErrBy == nil {
					r.FitErrBy = map[model.FitFailure]int{}
				}
				r.FitErrBy[model.FitFailureOf(err)]++
				r.log.Debug("drain not fitted", "tank", r.P.ID, "start", sg.Start(), "err", err)
				continue
			}
			f.Tank = r.P.ID
			if why, in := model.InflowSuspected(&f, r.Det.ExponentCheck()); in {
				// Not a drain of the outlet alone: its fall is counted and
				// listed as rejected for inflow, and nothing is written.
				r.Seg.Reject(sg, model.FallInflow)
				r.Drains--
				r.log.Debug("drain rejected", "tank", r.P.ID, "start", sg.Start(), "reason", why)
				continue
			}
			r.fresh = append(r.fresh, f)
			r.Det.AddFit(f, r.P.Detect)
		case model.Idle:
			f, err := model.FitIdle(&r.P.Tank, sg)
			if err != nil {
				r.log.Debug("idle period not fitted", "tank", r.P.ID, "start", sg.Start(), "err", err)
				continue
			}
			f.Tank = r.P.ID
			r.idles = append(r.idles, f)
			r.Det.AddIdle(f, r.P.Detect)
		}
	}
}

// Commit writes what the run has produced since the last commit, with the
// detector state and the checkpoint, in one transaction. With final set the
// segmenter is flushed first (end of the data available now; with complete
// set, the end of the history).
func (r *Run) Commit(final bool, nowNs int64) (fits []model.Fit, err error) {
	if final {
		if r.Complete {
			r.fitSegments(r.Seg.FlushFinal())
		} else {
			r.fitSegments(r.Seg.Flush())
		}
		r.takeFalls()
	}
	committed := r.Seg.CommittedNs()
	if committed == minNs {
		committed = r.cp.CommittedNs
	}
	blob, err := EncodeState(SavedState{Maintenance: r.maint, Detector: r.Det})
	if err != nil {
		return nil, fmt.Errorf("encode detector state: %w", err)
	}
	// UpdatedNs is the evaluation time of the pass, written only by its
	// final commit: a pass interrupted after some windows leaves the old
	// one, so that the next pass evaluates the midnights it re-reads. It is
	// never later than the data the pass read: a pass that read nothing
	// keeps the old one, and one evaluated past the end of its data (the
	// clock, --now) records the data's end, so that history arriving late
	// is still evaluated midnight by midnight as if it had come on time.
	updated := r.PrevEvalNs
	if final && r.LastNs > 0 {
		updated = max(r.PrevEvalNs, min(nowNs, r.LastNs))
	}
	cp := store.Checkpoint{
		CommittedNs: committed,
		ResumeNs:    committed,
		UpdatedNs:   updated,
		Samples:     r.cp.Samples + r.seen,
		Drains:      r.cp.Drains + len(r.fresh),
	}
	var out []store.OutboxItem
	for _, sink := range []string{r.P.WriteBack, r.P.EventsSink} {
		if sink == "" || len(r.fresh) == 0 {
			continue
		}
		it, err := fitsItem(sink, r.P.ID, r.fresh)
		if err != nil {
			return nil, fmt.Errorf("queue fits: %w", err)
		}
		out = append(out, it)
	}
	err = r.st.CommitTank(r.P.ID, store.TankCommit{
		Fits: r.fresh, Idles: r.idles, DetectorState: blob, Checkpoint: &cp, Outbox: out,
	})
	if err != nil {
		return nil, err
	}
	r.cp, r.HadCheckpoint = cp, true
	fits, r.fresh, r.idles, r.seen = r.fresh, nil, nil, 0
	return fits, nil
}

const minNs = -1 << 63
