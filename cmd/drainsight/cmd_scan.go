package main

import (
	"cmp"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"log/slog"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"time"

	"drainsight/alert"
	"drainsight/config"
	"drainsight/detect"
	"drainsight/model"
	"drainsight/scan"
	"drainsight/store"
)

const scanAbout = `One pass of the job: read every tank's level history (files, or InfluxDB
from each tank's checkpoint), cut out the gravity drains, fit the outlet
constant K of each, update each tank's statistics in the state file, and
report findings. The statistics are evaluated at every UTC midnight of the
history read (that earlier passes did not evaluate) and at the end, so faults
that came and went between passes are reported with their dates.

Writes DIR/events.jsonl (the drains fitted in this pass),
DIR/findings.jsonl (every transition of the pass and the state at the end:
new, ongoing or cleared) and DIR/feeds.jsonl (each tank's level feed: ok,
in a gap or silent, and the data gaps of the pass; a data gap is never a
finding, and a tank's findings are withheld, neither raised nor cleared,
while its data are missing), notifies the new and cleared findings of the
last 24 h (and one feed notice when a feed has been silent longer than
detection.feed_silent_limit, one when it is back), and prints a short
summary: how many falls were seen, fitted as
drains, rejected (too short, too small, too few samples, transient only,
inflow) and pending (under way, or ending within the settle delay of the
tank's last sample: left for the next scan); -v lists each fall.

With --final, or for a tank whose last sample is more than the settle delay
before --now, a file history is taken as complete: a drain that runs into
its end is fitted as a partial drain if it meets the minimums, and no drain
is held back. A tank's first InfluxDB scan reads 7 days;
for more, run backfill (with --reanalyse once a tank has been scanned).

For InfluxDB tanks the fits and active findings are written back to the
site's server (influx.fits_measurement, influx.findings_measurement) from an
outbox in the state file: a commit queues its fits in its own transaction,
and a write the server refuses stays queued and is retried later in the pass
and on later passes (outputs.delivery: backoff from 1 min to 1 h, dropped
with a log line after 30 d); the summary says how many batches are pending.

The transitions to notify are queued in the state file with the alert records
and sent after the pass, one per request with a stable id; a notifier that
fails keeps them for the next passes (outputs.delivery: backoff 1 min to
1 h, dropped with a log line after 30 d).

Running scan again over the same data fits nothing twice and repeats no alert.
Exit status: 0 done, 1 error (a tank failed, or notifications are still
pending), 2 bad usage, 3 with --fail-on-findings when a tank finding is active
(a feed notice is not one).`

// newStateUsage is the --new-state flag's help, shared by scan, backfill
// and serve.
const newStateUsage = "a first run: create the state file if it does not exist (without it, or outputs.new_state: true,\na missing state file is an error: a state volume that did not mount must not pass for a plant without history)"

// runScan implements "drainsight scan".
func runScan(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "scan", "scan --config FILE [--out DIR] [flags]", scanAbout)
	cfgPath := fs.String("config", "", "configuration file (required)")
	shardFlag := fs.String("shard", "", shardUsage)
	outDir := fs.String("out", "", "output directory (default: outputs.directory of the config)")
	statePath := fs.String("state", "", "state file (default: outputs.state_file of the config)")
	nowFlag := fs.String("now", "", "evaluation time, RFC 3339 (default: newest sample for files, the clock for InfluxDB)")
	failOn := fs.Bool("fail-on-findings", false, "exit with status 3 when a tank finding is active (a feed notice is not one)")
	final := fs.Bool("final", false, "the file histories are complete: fit a drain that runs into the end of a tank's data as a partial drain and\nhold back no drain for the settle delay (automatic for a tank whose last sample is more than the settle\ndelay before --now)")
	verbose := fs.Bool("v", false, "debug logging; lists every fall with its times and what became of it")
	newState := fs.Bool("new-state", false, newStateUsage)
	if err := parseFlags(e, fs, args); err != nil {
		return err
	}
	if *cfgPath == "" {
		return &usageError{"scan: --config is required"}
	}
	now, err := parseNow(*nowFlag)
	if err != nil {
		return err
	}
	log := newLogger(e.stderr, *verbose)
	cfg, err := config.LoadContext(ctx, *cfgPath)
	if err != nil {
		return err
	}
	sh, err := parseShard(*shardFlag)
	if err != nil {
		return &usageError{err.Error()}
	}
	cfg = sh.apply(cfg)
	res, err := scanOnce(ctx, e, cfg, *outDir, *statePath, scanOptions{now: now, final: *final, newState: *newState}, log)
	if err != nil {
		return err
	}
	if err := errTankFailures(res.failed()); err != nil {
		return err
	}
	if *failOn {
		for _, ev := range res.events {
			// A feed notice is the data path's condition, not a finding.
			if ev.At.Equal(res.now) && ev.Status != alert.StatusCleared && ev.Finding.Kind != detect.KindFeed {
				return errFindings
			}
		}
	}
	return nil
}

// scanOnce runs one pass of cfg and writes the outputs and the summary.
func scanOnce(ctx context.Context, e *env, cfg *config.Config, outDir, statePath string, opt scanOptions, log *slog.Logger) (*scanResult, error) {
	if outDir == "" {
		outDir = cfg.Outputs.Directory
	}
	if err := os.MkdirAll(outDir, 0o755); err != nil {
		return nil, err
	}
	j, err := openJob(cfg, statePath, opt.newState || cfg.Outputs.NewState, log)
	if err != nil {
		return nil, err
	}
	defer j.Close()
	start := time.Now()
	res, err := j.scan(ctx, opt)
	runErr := err
	if runErr == nil {
		runErr = errTankFailures(res.failed())
	}
	if rerr := j.st.RecordRun("scan", time.Now().UnixNano(), runErr); rerr != nil {
		log.Warn("recording the run failed", "err", rerr)
	}
	if err != nil {
		return res, err
	}
	// The lifecycle queued its transitions in the state file with its
	// records: they are sent now, or on a later pass if a notifier fails.
	res.notified = j.deliverNotifications(ctx)
	if err := writeOutputs(outDir, j.st, res); err != nil {
		return res, err
	}
	printSummary(e.stdout, res, outDir, time.Since(start))
	if res.notified.Pending > 0 {
		return res, errNotificationsPending{res.notified}
	}
	return res, nil
}

func parseNow(s string) (time.Time, error) {
	if s == "" {
		return time.Time{}, nil
	}
	t, err := time.Parse(time.RFC3339, s)
	if err != nil {
		return time.Time{}, &usageError{fmt.Sprintf("--now %q: want RFC 3339, e.g. 2026-03-01T06:00:00Z", s)}
	}
	return t.UTC(), nil
}

func newLogger(w io.Writer, verbose bool) *slog.Logger {
	lvl := slog.LevelInfo
	if verbose {
		lvl = slog.LevelDebug
	}
	return slog.New(slog.NewTextHandler(w, &slog.HandlerOptions{Level: lvl}))
}

// eventRecord is one line of events.jsonl (schema documented in the README).
type eventRecord struct {
	Tank          string    `json:"tank"`
	Start         time.Time `json:"start"`
	End           time.Time `json:"end"`
	Samples       int       `json:"samples"`
	HeadStartM    float64   `json:"head_start_m"`
	HeadEndM      float64   `json:"head_end_m"`
	KM25s         float64   `json:"k_m25_s"`
	KSE           float64   `json:"k_se"`
	KLo95         float64   `json:"k_lo95"`
	KHi95         float64   `json:"k_hi95"`
	CdAM2         float64   `json:"cd_a_m2"`
	Cd            *float64  `json:"cd"`
	R2            float64   `json:"r2"`
	Quality       string    `json:"quality"`
	QualityReason string    `json:"quality_reason,omitempty"`
	Method        string    `json:"method"`
	Exponent      float64   `json:"exponent"`
	ExponentSE    float64   `json:"exponent_se"`
	DatumM        *float64  `json:"datum_m,omitempty"`
	SigmaM        float64   `json:"sigma_m"`
	ResidualRho   float64   `json:"residual_rho"`
	EffectiveN    int       `json:"effective_samples"`
	Complete      bool      `json:"complete"`
}

// findingRecord is one line of findings.jsonl (schema documented in the README).
type findingRecord struct {
	Tank         string     `json:"tank"`
	Kind         string     `json:"kind"`
	Subtype      string     `json:"subtype,omitempty"`
	Status       string     `json:"status"`
	StatusAt     time.Time  `json:"status_at"`
	DetectedAt   time.Time  `json:"detected_at"`
	Onset        *time.Time `json:"onset"`
	OnsetLo      *time.Time `json:"onset_lo,omitempty"`
	OnsetHi      *time.Time `json:"onset_hi,omitempty"`
	MagnitudePct float64    `json:"magnitude_pct"`
	Statistic    string     `json:"statistic"`
	Value        float64    `json:"value"`
	Threshold    float64    `json:"threshold"`
	PValue       *float64   `json:"p_value"`
	Evidence     string     `json:"evidence"`
	ForecastDate *time.Time `json:"forecast_date,omitempty"`
}

func optTime(t time.Time) *time.Time {
	if t.IsZero() {
		return nil
	}
	t = t.UTC()
	return &t
}

func toEventRecord(f model.Fit) eventRecord {
	r := eventRecord{
		Tank: f.Tank, Start: time.Unix(0, f.StartNs).UTC(), End: time.Unix(0, f.EndNs).UTC(),
		Samples: f.N, HeadStartM: scan.Sig(f.H0M), HeadEndM: scan.Sig(f.H1M), KM25s: scan.Sig(f.KM25s), KSE: scan.Sig(f.KSEM25s),
		KLo95: scan.Sig(f.KLo95M25s), KHi95: scan.Sig(f.KHi95M25s), CdAM2: scan.Sig(f.CdAM2), R2: scan.Sig(f.R2),
		Quality: string(f.Quality), QualityReason: f.QualityReason, Method: f.Method,
		Exponent: scan.Sig(f.Exponent), ExponentSE: scan.Sig(f.ExponentSE), SigmaM: scan.Sig(f.SigmaM),
		ResidualRho: scan.Sig(f.ResidualRho), EffectiveN: f.EffectiveN, Complete: f.Complete,
	}
	if f.DatumFitted {
		d := scan.Sig(f.DatumM)
		r.DatumM = &d
	}
	if !math.IsNaN(f.Cd) && f.Cd > 0 {
		cd := scan.Sig(f.Cd)
		r.Cd = &cd
	}
	return r
}

func toFindingRecord(ev alert.Event) findingRecord {
	f := ev.Finding
	r := findingRecord{
		Tank: f.Tank, Kind: f.Kind, Subtype: f.Subtype, Status: string(ev.Status), StatusAt: ev.At.UTC(), DetectedAt: f.DetectedAt.UTC(),
		Onset: optTime(f.Onset), OnsetLo: optTime(f.OnsetLo), OnsetHi: optTime(f.OnsetHi),
		MagnitudePct: scan.Sig(f.MagnitudePct), Statistic: f.Statistic, Value: scan.Sig(f.Value), Threshold: scan.Sig(f.Threshold),
		Evidence: f.Evidence,
	}
	if !math.IsNaN(f.PValue) {
		p := f.PValue
		if p != 0 {
			p = scan.Sig(p)
		}
		r.PValue = &p
	}
	if f.Forecast != nil {
		r.ForecastDate = optTime(f.Forecast.Date)
	}
	return r
}

// writeOutputs writes events.jsonl, findings.jsonl and feeds.jsonl
// atomically (a
// temporary file renamed into place), so a reader never sees half a file.
func writeOutputs(dir string, st *store.Store, res *scanResult) error {
	// The fits and transitions wait in the state file's outbox until a
	// file lists them: those of a pass that was killed, or that could not
	// write its files (a full disk), come with this pass's.
	evItems, err := st.Pending(scan.SinkEvents)
	if err != nil {
		return err
	}
	fits := res.fits()
	seen := map[string]bool{}
	for _, f := range fits {
		seen[fmt.Sprint(f.Tank, f.EndNs)] = true
	}
	for _, it := range evItems {
		var fs []model.Fit
		if err := scan.DecodeGob(it.Data, &fs); err != nil {
			return fmt.Errorf("outbox item %s: %w", it.ID, err)
		}
		for _, f := range fs {
			if k := fmt.Sprint(f.Tank, f.EndNs); !seen[k] {
				seen[k] = true
				fits = append(fits, f)
			}
		}
	}
	slices.SortFunc(fits, func(a, b model.Fit) int {
		return cmp.Or(cmp.Compare(a.Tank, b.Tank), cmp.Compare(a.StartNs, b.StartNs))
	})
	var evs []any
	for _, f := range fits {
		evs = append(evs, toEventRecord(f))
	}
	if err := writeJSONL(filepath.Join(dir, "events.jsonl"), evs); err != nil {
		return err
	}
	if err := st.Delivered(evItems...); err != nil {
		return err
	}
	fItems, err := st.Pending(scan.SinkFindings)
	if err != nil {
		return err
	}
	var left []scan.QueuedEvent
	for _, it := range fItems {
		var q scan.QueuedEvent
		if err := scan.DecodeGob(it.Data, &q); err != nil {
			return fmt.Errorf("outbox item %s: %w", it.ID, err)
		}
		if q.Pass != res.pass {
			left = append(left, q)
		}
	}
	slices.SortFunc(left, func(a, b scan.QueuedEvent) int { return cmp.Or(cmp.Compare(a.Pass, b.Pass), cmp.Compare(a.Seq, b.Seq)) })
	var fr []any
	for _, q := range left {
		fr = append(fr, toFindingRecord(q.Event))
	}
	for _, ev := range res.events {
		fr = append(fr, toFindingRecord(ev))
	}
	if err := writeJSONL(filepath.Join(dir, "findings.jsonl"), fr); err != nil {
		return err
	}
	if err := st.Delivered(fItems...); err != nil {
		return err
	}
	var feeds []any
	for i := range res.outcomes {
		if r, ok := res.outcomes[i].FeedRecord(); ok {
			feeds = append(feeds, r)
		}
	}
	return writeJSONL(filepath.Join(dir, "feeds.jsonl"), feeds)
}

func writeJSONL(path string, recs []any) error {
	tmp, err := os.CreateTemp(filepath.Dir(path), ".tmp-"+filepath.Base(path))
	if err != nil {
		return err
	}
	defer os.Remove(tmp.Name())
	enc := json.NewEncoder(tmp)
	enc.SetEscapeHTML(false)
	for _, r := range recs {
		if err := enc.Encode(r); err != nil {
			tmp.Close()
			return fmt.Errorf("write %s: %w", path, err)
		}
	}
	if err := tmp.Close(); err != nil {
		return err
	}
	return os.Rename(tmp.Name(), path)
}

func printSummary(w io.Writer, res *scanResult, outDir string, took time.Duration) {
	var samples int64
	drains, fits := 0, 0
	for _, o := range res.outcomes {
		samples += o.Samples
		drains += o.Drains
		fits += len(o.Fits)
	}
	fmt.Fprintf(w, "Scanned %d tanks at %s: %d samples, %d drains, %d fitted (%s).\n",
		len(res.outcomes), res.now.Format(time.RFC3339), samples, drains, fits, took.Round(time.Millisecond))
	if p := res.ingest.Problems(); p > 0 {
		fmt.Fprintf(w, "Input problems: %d (see the log for file:line examples).\n", p)
	}
	printFalls(w, res.outcomes)
	for _, o := range res.failed() {
		fmt.Fprintf(w, "FAILED %s: %v\n", o.Tank, o.Err)
	}
	printFeeds(w, res.outcomes)
	if d := res.notified; d.Pending+d.Expired > 0 {
		printDelivery(w, "Notifications", "sent", d)
	}
	if d := res.writeBack; d.Delivered+d.Deferred+d.Expired+d.Pending > 0 {
		printDelivery(w, "Write-back to InfluxDB", "batches written", d)
	}
	if len(res.events) == 0 {
		fmt.Fprintln(w, "No findings.")
	} else {
		fmt.Fprintln(w)
		alert.WriteTable(w, res.events)
		fmt.Fprintln(w)
		fmt.Fprintln(w, alert.Caution)
	}
	fmt.Fprintf(w, "Outputs: %s, %s, %s\n", filepath.Join(outDir, "events.jsonl"), filepath.Join(outDir, "findings.jsonl"), filepath.Join(outDir, "feeds.jsonl"))
}

// printDelivery writes one outbox line of the summary: what was delivered,
// what waits, what expired, and why it fails.
func printDelivery(w io.Writer, what, done string, d scan.Delivery) {
	fmt.Fprintf(w, "%s: %d %s, %d pending", what, d.Delivered, done, d.Pending)
	if d.Expired > 0 {
		fmt.Fprintf(w, ", %d expired undelivered (see the log)", d.Expired)
	}
	if d.LastError != "" {
		fmt.Fprintf(w, "; failing: %s", d.LastError)
	}
	if d.Pending > 0 {
		fmt.Fprint(w, " (kept in the state file and retried on the next passes)")
	}
	fmt.Fprintln(w, ".")
}

// printFalls writes what became of the falls of the pass: how many were
// seen, fitted, rejected by reason and left pending.
func printFalls(w io.Writer, outcomes []scan.Outcome) {
	var st model.SegmentStats
	fitFailed := 0
	by := map[model.FitFailure]int{}
	for _, o := range outcomes {
		s := o.Seg
		st.Falls += s.Falls
		st.Drains += s.Drains
		st.RejectedShort += s.RejectedShort
		st.RejectedSmall += s.RejectedSmall
		st.RejectedFew += s.RejectedFew
		st.RejectedTransient += s.RejectedTransient
		st.RejectedInflow += s.RejectedInflow
		st.Pending += s.Pending
		fitFailed += o.FitFailed
		for r, n := range o.FitFailedBy {
			by[r] += n
		}
	}
	fmt.Fprintf(w, "Falls: %d seen, %d drains (%d fitted", st.Falls, st.Drains, st.Drains-fitFailed)
	if fitFailed > 0 {
		var why []string
		for _, r := range []model.FitFailure{model.FitTooFewSamples, model.FitNotFalling, model.FitBadInput} {
			if by[r] > 0 {
				why = append(why, fmt.Sprintf("%d %s", by[r], r))
			}
		}
		fmt.Fprintf(w, ", %d fits failed: %s", fitFailed, strings.Join(why, ", "))
	}
	fmt.Fprint(w, ")")
	var rej []string
	for _, r := range []struct {
		n    int
		what string
	}{
		{st.RejectedShort, "too short"},
		{st.RejectedSmall, "too small"},
		{st.RejectedFew, "too few samples"},
		{st.RejectedTransient, "transient only"},
		{st.RejectedInflow, "inflow"},
	} {
		if r.n > 0 {
			rej = append(rej, fmt.Sprintf("%d %s", r.n, r.what))
		}
	}
	if len(rej) > 0 {
		fmt.Fprintf(w, ", rejected: %s", strings.Join(rej, ", "))
	}
	if st.Pending > 0 {
		fmt.Fprintf(w, ", %d pending (under way or within the settle delay of the end of the data: the next scan, or --final, fits them)", st.Pending)
	}
	fmt.Fprintln(w, ".")
}

// printFeeds writes the feeds' status: how many are ok, in a gap or
// silent at the scan's time, and the data gaps seen in this pass. Data
// availability is the data path's condition, reported here and never as a
// tank finding.
func printFeeds(w io.Writer, outcomes []scan.Outcome) {
	count := map[detect.FeedState]int{}
	var notOK, gapped []string
	for _, o := range outcomes {
		fs, ok := o.Feed()
		if !ok {
			continue
		}
		count[fs.State]++
		if fs.State == detect.FeedGap || fs.State == detect.FeedSilent {
			notOK = append(notOK, fmt.Sprintf("%s %s since %s (%.1f h)", o.Tank, fs.State, fs.SilentSince.Format(time.RFC3339), fs.SilentForS/3600))
		}
		if len(o.Gaps) > 0 {
			var longest time.Duration
			for _, g := range o.Gaps {
				longest = max(longest, time.Duration(g.EndNs-g.StartNs))
			}
			gapped = append(gapped, fmt.Sprintf("%s %d (longest %.1f h)", o.Tank, len(o.Gaps), longest.Hours()))
		}
	}
	fmt.Fprintf(w, "Feeds: %d ok, %d in a gap, %d silent, %d without data.\n",
		count[detect.FeedOK], count[detect.FeedGap], count[detect.FeedSilent], count[detect.FeedNoData])
	for _, s := range notOK {
		fmt.Fprintf(w, "  %s\n", s)
	}
	if len(gapped) > 0 {
		fmt.Fprintf(w, "Data gaps in this pass: %s.\n", strings.Join(gapped, "; "))
	}
}
