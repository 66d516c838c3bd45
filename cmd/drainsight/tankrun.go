package main

import (
	"bytes"
	"cmp"
	"encoding/gob"
	"fmt"
	"log/slog"
	"math"
	"os"
	"path/filepath"
	"slices"
	"sort"
	"strconv"
	"strings"
	"time"

	"drainsight/detect"
	"drainsight/model"
	"drainsight/store"
)

// minLookback is the least a scan re-reads before a tank's committed time,
// so that the segmenter sees a drain still open at the boundary whole and has
// enough quiet data to estimate the noise (model.Segmenter.CommittedNs asks
// for at least 8 h and more than the longest drain). A site's influx.overlap
// may ask for more.
const minLookback = 12 * time.Hour

// encodeState and decodeState keep the detector state as gob, which carries
// the NaN the statistics use for "not yet known" (JSON cannot).
func encodeState(s savedState) ([]byte, error) { return encodeGob(s) }

func decodeState(blob []byte, s *savedState) error { return decodeGob(blob, s) }

// encodeGob and decodeGob are the store's blob encoding for our own values
// (detector state, alert records): gob keeps NaN and needs no schema file.
func encodeGob(v any) ([]byte, error) {
	var b bytes.Buffer
	err := gob.NewEncoder(&b).Encode(v)
	return b.Bytes(), err
}

func decodeGob(blob []byte, v any) error {
	return gob.NewDecoder(bytes.NewReader(blob)).Decode(v)
}

// savedState is the detector state blob kept in the store: the detector's
// own state plus the fingerprint of the maintenance records it has applied,
// so that a record added or removed later triggers a replay.
type savedState struct {
	Maintenance string        `json:"maintenance"`
	Detector    *detect.State `json:"detector"`
}

// tankRun carries one tank through one scan: segmenter, fits, detector and
// the commits to the store. It is used by one goroutine at a time.
type tankRun struct {
	p        *plan
	st       *store.Store
	log      *slog.Logger
	det      *detect.State
	seg      *model.Segmenter
	cp       store.Checkpoint
	hadCP    bool
	maint    string
	fresh    []model.Fit // fits of this scan, in time order
	idles    []model.IdleFit
	fitErr   int
	fitErrBy map[model.FitFailure]int // fitErr by reason
	drains   int
	// recv is the level of the tank the outlet discharges into, read from
	// its files; nil for a free outlet and for InfluxDB (whose windows
	// carry it in Series.SubmergedM).
	recv *model.ReceivingLevel
	// complete is set before the pass's final commit when the tank's
	// history is known to be complete (scan --final, or --now past its
	// last sample by more than the settle delay): the drain under way and
	// those within the settle delay are judged then (model.FlushFinal).
	complete bool
	lastNs   int64        // time of the last sample pushed in this run
	falls    []model.Fall // every fall decided in this run
	seen     int64        // samples pushed since the last commit
	total    int64        // samples pushed in this run
	// prevEvalNs is the evaluation time of the previous pass (its
	// checkpoint's UpdatedNs): history before it was evaluated already.
	prevEvalNs int64
	// maintChanged is set when maintenance records were added or removed
	// since the previous pass: the baseline restarted.
	maintChanged bool
	// fromNs: samples before it are not pushed (the previous pass has them).
	fromNs int64
	// limitNs: no evaluation at or after it (the pass's --now).
	limitNs int64
	// cutNs is the next daily evaluation instant after the last sample
	// pushed (0 before the first).
	cutNs int64
	evals []evaluation
}

// openTankRun loads the tank's checkpoint and detector state (replaying the
// stored history if the maintenance records changed) and returns the run and
// the time from which samples must be pushed.
func openTankRun(st *store.Store, p *plan, log *slog.Logger) (*tankRun, int64, error) {
	r := &tankRun{p: p, st: st, log: log}
	id := p.cfg.ID
	cp, ok, err := st.Checkpoint(id)
	if err != nil {
		return nil, 0, err
	}
	r.cp, r.hadCP, r.prevEvalNs = cp, ok, cp.UpdatedNs
	recs, err := st.Maintenance(id)
	if err != nil {
		return nil, 0, err
	}
	r.maint = maintenanceFingerprint(recs)
	blob, err := st.DetectorState(id)
	if err != nil {
		return nil, 0, err
	}
	var saved savedState
	if len(blob) > 0 {
		if err := decodeState(blob, &saved); err != nil {
			return nil, 0, fmt.Errorf("stored detector state: %w", err)
		}
	}
	r.maintChanged = saved.Detector != nil && saved.Maintenance != r.maint
	stale := saved.Detector != nil && saved.Detector.Version != detect.StateVersion
	if stale {
		// Written by another release: its fields may not mean what this
		// one reads. The stored fits and idle periods are the record.
		log.Warn("detector state of another layout rebuilt from the stored fits", "tank", id,
			"version", saved.Detector.Version, "want", detect.StateVersion)
	}
	if saved.Detector == nil || saved.Maintenance != r.maint || stale {
		if r.det, err = replay(st, p, recs); err != nil {
			return nil, 0, err
		}
	} else {
		r.det = saved.Detector
	}
	opt := p.segOpt
	from := int64(0)
	if ok {
		opt.EmitFromNs = cp.CommittedNs
		from = cp.CommittedNs - int64(max(minLookback, p.lookback))
	}
	r.seg = model.NewSegmenter(&p.tank, opt)
	return r, from, nil
}

// replay rebuilds a detector state from the stored fits, idle periods and
// maintenance records, in time order.
func replay(st *store.Store, p *plan, recs []store.Maintenance) (*detect.State, error) {
	id := p.cfg.ID
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
			det.AddFit(*it.fit, p.detOpt)
		case it.idle != nil:
			det.AddIdle(*it.idle, p.detOpt)
		default:
			if err := det.Reset(time.Unix(0, it.m.AtNs).UTC(), string(it.m.Action)); err != nil {
				return nil, err
			}
		}
	}
	return det, nil
}

func maintenanceFingerprint(recs []store.Maintenance) string {
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

// feed pushes samples (time order, any chunking) and evaluates the
// statistics at every UTC midnight the data cross that the previous pass did
// not evaluate, with the data before the midnight only.
func (r *tankRun) feed(s *model.Series) {
	i, n := 0, s.Len()
	for i < n && s.TimeNs[i] < r.fromNs {
		i++
	}
	for n > i && s.TimeNs[n-1] >= r.limitNs {
		n-- // samples after the pass's evaluation time wait for a later pass
	}
	for i < n {
		// Evaluate at every midnight the data have passed, gaps included.
		for r.cutNs != 0 && s.TimeNs[i] >= r.cutNs {
			if cut := r.cutNs; cut > r.prevEvalNs && cut < r.limitNs {
				at := time.Unix(0, cut).UTC()
				r.evals = append(r.evals, evaluate(r.det, at, r.p.detOpt))
			}
			r.cutNs += int64(evalEvery)
		}
		if r.cutNs == 0 {
			r.cutNs = nextEval(s.TimeNs[i])
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
func (r *tankRun) push(s *model.Series) {
	if s.Len() == 0 {
		return
	}
	r.seen += int64(s.Len())
	r.total += int64(s.Len())
	r.lastNs = s.TimeNs[s.Len()-1]
	r.det.AddSeries(s, r.p.detOpt)
	if r.p.cfg.Outlet.DischargesInto == "" {
		r.seg.Push(s.TimeNs, s.HeadM, s.InflowM3s)
	} else {
		// The receiving level comes with the samples (InfluxDB: pulled in
		// the same window) or from the receiving tank's files; where it is
		// not known it is NaN, never a free outlet.
		sub := s.SubmergedM
		if sub == nil && r.recv != nil {
			sub = r.recv.At(s.TimeNs)
		}
		if sub == nil {
			sub = make([]float64, s.Len())
			for i := range sub {
				sub[i] = math.NaN()
			}
		}
		r.seg.PushSubmerged(s.TimeNs, s.HeadM, s.InflowM3s, sub)
	}
	r.fitSegments(r.seg.Take())
	r.takeFalls()
}

// takeFalls collects the falls the segmenter decided and lists each at
// debug level (scan -v): its times, drop and outcome.
func (r *tankRun) takeFalls() {
	for _, f := range r.seg.TakeFalls() {
		r.falls = append(r.falls, f)
		r.log.Debug("fall", "tank", r.p.cfg.ID, "start", time.Unix(0, f.StartNs).UTC(), "end", time.Unix(0, f.EndNs).UTC(),
			"drop_m", sig(f.DropM), "outcome", f.Outcome.String())
	}
}

func (r *tankRun) fitSegments(segs []model.Segment) {
	for i := range segs {
		sg := &segs[i]
		switch sg.Kind {
		case model.Drain:
			r.drains++
			f, err := model.FitDrain(&r.p.tank, sg, r.p.fitOpt)
			if err != nil {
				r.fitErr++
				if r.fitErrBy == nil {
					r.fitErrBy = map[model.FitFailure]int{}
				}
				r.fitErrBy[model.FitFailureOf(err)]++
				r.log.Debug("drain not fitted", "tank", r.p.cfg.ID, "start", sg.Start(), "err", err)
				continue
			}
			f.Tank = r.p.cfg.ID
			if why, in := model.InflowSuspected(&f, r.det.ExponentCheck()); in {
				// Not a drain of the outlet alone: its fall is counted and
				// listed as rejected for inflow, and nothing is written.
				r.seg.Reject(sg, model.FallInflow)
				r.drains--
				r.log.Debug("drain rejected", "tank", r.p.cfg.ID, "start", sg.Start(), "reason", why)
				continue
			}
			r.fresh = append(r.fresh, f)
			r.det.AddFit(f, r.p.detOpt)
		case model.Idle:
			f, err := model.FitIdle(&r.p.tank, sg)
			if err != nil {
				r.log.Debug("idle period not fitted", "tank", r.p.cfg.ID, "start", sg.Start(), "err", err)
				continue
			}
			f.Tank = r.p.cfg.ID
			r.idles = append(r.idles, f)
			r.det.AddIdle(f, r.p.detOpt)
		}
	}
}

// commit writes what the run has produced since the last commit, with the
// detector state and the checkpoint, in one transaction. With final set the
// segmenter is flushed first (end of the data available now; with complete
// set, the end of the history).
func (r *tankRun) commit(final bool, nowNs int64) (fits []model.Fit, err error) {
	if final {
		if r.complete {
			r.fitSegments(r.seg.FlushFinal())
		} else {
			r.fitSegments(r.seg.Flush())
		}
		r.takeFalls()
	}
	committed := r.seg.CommittedNs()
	if committed == minNs {
		committed = r.cp.CommittedNs
	}
	blob, err := encodeState(savedState{Maintenance: r.maint, Detector: r.det})
	if err != nil {
		return nil, fmt.Errorf("encode detector state: %w", err)
	}
	// UpdatedNs is the evaluation time of the pass, written only by its
	// final commit: a pass interrupted after some windows leaves the old
	// one, so that the next pass evaluates the midnights it re-reads.
	updated := r.prevEvalNs
	if final {
		updated = nowNs
	}
	cp := store.Checkpoint{
		CommittedNs: committed,
		ResumeNs:    committed,
		UpdatedNs:   updated,
		Samples:     r.cp.Samples + r.seen,
		Drains:      r.cp.Drains + len(r.fresh),
	}
	err = r.st.CommitTank(r.p.cfg.ID, store.TankCommit{
		Fits: r.fresh, Idles: r.idles, DetectorState: blob, Checkpoint: &cp,
	})
	if err != nil {
		return nil, err
	}
	r.cp, r.hadCP = cp, true
	fits, r.fresh, r.idles, r.seen = r.fresh, nil, nil, 0
	return fits, nil
}

const minNs = -1 << 63

// openStore opens the state file with a lock timeout, creating its directory.
func openStore(path string) (*store.Store, error) {
	if err := os.MkdirAll(filepath.Dir(path), 0o755); err != nil {
		return nil, err
	}
	return store.Open(path, 5*time.Second)
}
