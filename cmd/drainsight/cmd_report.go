package main

import (
	"bytes"
	"cmp"
	"context"
	"encoding/json"
	"fmt"
	"log/slog"
	"os"
	"path/filepath"
	"slices"
	"time"

	"drainsight/alert"
	"drainsight/alert/report"
	"drainsight/config"
	"drainsight/detect"
	"drainsight/scan"
	"drainsight/store"
)

const reportAbout = `Writes the outlet-health report from the stored state (no data are read):
DIR/report.md and DIR/report.html, with each tank's outlet constant against
its baseline, drain times, the forecast date of the maintenance threshold,
the active findings with their evidence, the fleet watch list, and each
tank's level feed at the last scan with the data gaps of the week (the data
path's condition, never a finding).`

func runReport(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "report", "report --config FILE [--out DIR] [--now TIME]", reportAbout)
	cfgPath := fs.String("config", "", "configuration file (required)")
	outDir := fs.String("out", "", "output directory (default: outputs.directory of the config)")
	statePath := fs.String("state", "", "state file (default: outputs.state_file of the config)")
	nowFlag := fs.String("now", "", "report time, RFC 3339 (default: now)")
	if err := parseFlags(e, fs, args); err != nil {
		return err
	}
	if *cfgPath == "" {
		return &usageError{"report: --config is required"}
	}
	now, err := parseNow(*nowFlag)
	if err != nil {
		return err
	}
	if now.IsZero() {
		now = time.Now().UTC()
	}
	cfg, err := config.LoadContext(ctx, *cfgPath)
	if err != nil {
		return err
	}
	dir := *outDir
	if dir == "" {
		dir = cfg.Outputs.Directory
	}
	if err := writeReportFiles(cfg, *statePath, dir, now, newLogger(e.stderr, false)); err != nil {
		return err
	}
	fmt.Fprintf(e.stdout, "Report: %s, %s\n", filepath.Join(dir, "report.md"), filepath.Join(dir, "report.html"))
	return nil
}

// reportWindow is how much history the report's trend shows.
const reportWindow = 56 * 24 * time.Hour

// writeReportFiles renders the report from the state file.
func writeReportFiles(cfg *config.Config, statePath, dir string, now time.Time, log *slog.Logger) error {
	plans, err := buildPlans(cfg)
	if err != nil {
		return err
	}
	if statePath == "" {
		statePath = cfg.Outputs.StateFile
	}
	st, err := openStore(statePath, false)
	if err != nil {
		return err
	}
	defer st.Close()
	err = writeReport(cfg, plans, st, dir, now, log)
	// serve writes a report missed while it was down at start-up: the
	// store remembers when the last one was written
	if rerr := st.RecordRun("report", time.Now().UnixNano(), err); rerr != nil {
		log.Warn("recording the report run failed", "err", rerr)
	}
	return err
}

func writeReport(cfg *config.Config, plans []*plan, st *store.Store, dir string, now time.Time, log *slog.Logger) error {
	in, err := buildReport(cfg, plans, st, now)
	if err != nil {
		return err
	}
	var md, html bytes.Buffer
	if err := report.Markdown(&md, in); err != nil {
		return err
	}
	if err := report.HTML(&html, in); err != nil {
		return err
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return err
	}
	if err := os.WriteFile(filepath.Join(dir, "report.md"), md.Bytes(), 0o644); err != nil {
		return err
	}
	log.Debug("report written", "dir", dir)
	return os.WriteFile(filepath.Join(dir, "report.html"), html.Bytes(), 0o644)
}

func buildReport(cfg *config.Config, plans []*plan, st *store.Store, now time.Time) (report.Input, error) {
	in := report.Input{Now: now, PeriodStart: now.Add(-7 * 24 * time.Hour), FDR: 0.05}
	if len(cfg.Sites) > 0 {
		in.Site = cfg.Sites[0].Description
		if in.Site == "" {
			in.Site = cfg.Sites[0].ID
		}
	}
	if in.Site == "" {
		in.Site = filepath.Base(cfg.File)
	}
	var states []*detect.State
	byTank := map[string]*report.Tank{}
	var order []string
	for _, p := range plans {
		id := p.cfg.ID
		blob, err := st.DetectorState(id)
		if err != nil {
			return in, err
		}
		var saved scan.SavedState
		if len(blob) > 0 {
			if err := scan.DecodeState(blob, &saved); err != nil {
				return in, fmt.Errorf("tank %s: stored detector state: %w", id, err)
			}
		}
		det := saved.Detector
		if det == nil {
			det = detect.NewState(id)
		}
		states = append(states, det)
		fits, err := st.Fits(id, now.Add(-reportWindow).UnixNano(), now.UnixNano()+1)
		if err != nil {
			return in, err
		}
		t := &report.Tank{ID: id, Site: p.cfg.Site, Description: p.cfg.Description, Fits: fits}
		if det.Ref.Set {
			t.BaselineKM25s = det.Ref.KM25s
		}
		if det.Sensor.LastSampleNs > 0 {
			t.LastSample = time.Unix(0, det.Sensor.LastSampleNs).UTC()
		}
		t.Gaps = det.GapsBetween(in.PeriodStart, now)
		if blob, err := st.Feed(id); err != nil {
			return in, err
		} else if len(blob) > 0 {
			var fr scan.FeedRecord
			if err := json.Unmarshal(blob, &fr); err != nil {
				return in, fmt.Errorf("tank %s: stored feed status: %w", id, err)
			}
			t.Feed = fr.FeedStatus
		}
		work, err := st.Maintenance(id)
		if err != nil {
			return in, err
		}
		t.Work = reportWork(work, now.Add(-reportWindow), now)
		recs, err := st.Alerts(id)
		if err != nil {
			return in, err
		}
		for _, ar := range recs {
			var r alert.Record
			if err := scan.DecodeGob(ar.Data, &r); err != nil {
				return in, fmt.Errorf("tank %s: stored alert: %w", id, err)
			}
			if r.Status != alert.StatusCleared {
				t.Findings = append(t.Findings, r)
				if t.Forecast == nil && r.Finding.Forecast != nil {
					t.Forecast = r.Finding.Forecast
				}
			}
		}
		byTank[id] = t
		order = append(order, id)
	}
	// Each tank is evaluated with its own options; the watch list controls
	// the false discovery rate across the fleet (Benjamini-Hochberg).
	ranks := make([]detect.FleetRank, len(states))
	pvals := make([]float64, len(states))
	for i, st := range states {
		ranks[i] = detect.RankFleet([]*detect.State{st}, now, plans[i].Detect, in.FDR)[0]
		pvals[i] = ranks[i].PValue
	}
	q, watch := detect.BenjaminiHochberg(pvals, in.FDR)
	for i := range ranks {
		ranks[i].QValue, ranks[i].Watch = q[i], watch[i]
	}
	slices.SortStableFunc(ranks, func(a, b detect.FleetRank) int {
		return cmp.Or(cmp.Compare(evidence(a.PValue), evidence(b.PValue)), cmp.Compare(a.Tank, b.Tank))
	})
	for _, r := range ranks {
		t := byTank[r.Tank]
		if t == nil {
			continue
		}
		t.Rank = r
		if t.Forecast == nil {
			for _, f := range r.Findings {
				if f.Forecast != nil {
					t.Forecast = f.Forecast
					break
				}
			}
		}
		in.Tanks = append(in.Tanks, *t)
		delete(byTank, r.Tank)
	}
	for _, id := range order {
		if t, ok := byTank[id]; ok {
			in.Tanks = append(in.Tanks, *t)
		}
	}
	return in, nil
}

// evidence orders p-values for the fleet view: no evidence (NaN) sorts last.
func evidence(p float64) float64 {
	if p != p {
		return 1
	}
	return p
}

// reportWork picks a tank's maintenance records for the report (recs in
// time order): those between from and now, and before them the last one
// that restarted the outlet baseline, which the report's K are compared
// against.
func reportWork(recs []store.Maintenance, from, now time.Time) []report.Work {
	var out []report.Work
	start := -1 // the last baseline restart before from
	for i, m := range recs {
		if m.AtNs < from.UnixNano() && m.Action != store.ActionSensorCalibrated {
			start = i
		}
	}
	for i, m := range recs {
		if m.AtNs > now.UnixNano() || (i != start && m.AtNs < from.UnixNano()) {
			continue
		}
		w := report.Work{At: time.Unix(0, m.AtNs).UTC(), Action: string(m.Action), Note: m.Note}
		if t := m.Test; t != nil {
			w.Until, w.Drains = time.Unix(0, t.UntilNs).UTC(), t.Drains
			w.KM25s, w.KLo95M25s, w.KHi95M25s = t.KM25s, t.KM25s-1.96*t.KSEM25s, t.KM25s+1.96*t.KSEM25s
		}
		out = append(out, w)
	}
	return out
}
