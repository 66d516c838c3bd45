package main

import (
	"context"
	"errors"
	"fmt"
	"path/filepath"
	"slices"
	"strings"
	"text/tabwriter"
	"time"

	"drainsight/config"
	"drainsight/detect"
	"drainsight/model"
	"drainsight/store"
)

const checkAbout = `Validates a configuration file, reporting every problem at once with its
line and field, and says what a scan would read: the files each tank's globs
match now, and, for InfluxDB sites, the result of a real query (a ping alone
succeeds on 1.8 even with a wrong password). It segments the first 14 days of
each file tank's data and warns when the settings reject every fall in them
(a minimum duration longer than any drain, say). Exit status 1 when anything
is wrong; warnings do not change it.`

func runCheck(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "check", "check --config FILE", checkAbout)
	cfgPath := fs.String("config", "", "configuration file (required)")
	offline := fs.Bool("offline", false, "do not contact InfluxDB servers")
	if err := parseFlags(e, fs, args); err != nil {
		return err
	}
	if *cfgPath == "" {
		return &usageError{"check: --config is required"}
	}
	cfg, err := config.LoadContext(ctx, *cfgPath)
	if err != nil {
		return err
	}
	plans, err := buildPlans(cfg)
	if err != nil {
		return err
	}
	levels, err := buildLevels(cfg)
	if err != nil {
		return err
	}
	w := e.stdout
	fmt.Fprintf(w, "%s: valid, %d sites, %d tanks", cfg.File, len(cfg.Sites), len(cfg.Tanks))
	if len(levels) > 0 {
		fmt.Fprintf(w, ", %d levels", len(levels))
	}
	fmt.Fprintln(w, ".")
	tw := tabwriter.NewWriter(w, 0, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "TANK\tSHAPE\tHEAD RANGE\tSENSOR\tSOURCE\tWOULD READ")
	var problems []error
	for _, p := range append(slices.Clone(plans), levels...) {
		src := p.cfg.Source
		read := ""
		if src.Format == "influx" {
			read = "site " + p.cfg.Site
		} else {
			n := 0
			for _, pat := range src.Paths {
				m, err := globMatches(pat)
				if err != nil {
					problems = append(problems, fmt.Errorf("tank %s: source.paths %q: %w", p.cfg.ID, pat, err))
				}
				n += m
			}
			read = fmt.Sprintf("%d files", n)
			if n == 0 {
				problems = append(problems, fmt.Errorf("tank %s: source.paths %q match no file", p.cfg.ID, src.Paths))
			}
		}
		shape, head := "level", 0.0 // a level: read for the outlets that discharge into it
		if l := cfg.Level(p.cfg.ID); l != nil {
			head = l.HeightM
		} else {
			shape, head = string(p.cfg.Geometry.Shape), p.Tank.DrainableHeightM()
		}
		fmt.Fprintf(tw, "%s\t%s\t0-%.3g m\t%s %s\t%s\t%s\n", p.cfg.ID, shape, head,
			p.cfg.Sensor.Kind, p.cfg.Sensor.Unit, src.Format, read)
	}
	tw.Flush()
	warnRejectAll(ctx, w, plans, receivers(plans, levels))
	if !*offline {
		clients, err := openClients(cfg)
		if err == nil {
			for id, c := range clients {
				cctx, cancel := context.WithTimeout(ctx, 30*time.Second)
				err := c.Check(cctx)
				cancel()
				if err != nil {
					problems = append(problems, fmt.Errorf("site %s: %w", id, err))
				} else {
					fmt.Fprintf(w, "site %s: InfluxDB query ok (%s)\n", id, c.Conn())
				}
			}
			closeClients(clients)
		} else {
			problems = append(problems, err)
		}
	}
	return errors.Join(problems...)
}

func globMatches(pat string) (int, error) {
	m, err := filepath.Glob(pat)
	return len(m), err
}

const maintenanceAbout = `Keeps the maintenance log that detection honours. Cleaning, repairing or
replacing an outlet restarts its baseline from that time; calibrating the
sensor restarts the sensor checks. The next scan replays the stored drains
with the records in time order, so a record may be added after the fact.

  drainsight maintenance add --config F --tank T --at TIME --action cleaned|repaired|replaced|sensor-calibrated [--note TEXT] [--new-state]
  drainsight maintenance list --config F [--tank T]
  drainsight maintenance remove --config F --id N`

func runMaintenance(ctx context.Context, e *env, args []string) error {
	if len(args) == 0 || strings.HasPrefix(args[0], "-") {
		fs := newFlags(e, "maintenance", "maintenance add|list|remove [flags]", maintenanceAbout)
		if err := parseFlags(e, fs, args); err != nil {
			return err
		}
		return &usageError{"maintenance: want add, list or remove"}
	}
	verb, rest := args[0], args[1:]
	fs := newFlags(e, "maintenance "+verb, "maintenance "+verb+" [flags]", maintenanceAbout)
	cfgPath := fs.String("config", "", "configuration file (required)")
	statePath := fs.String("state", "", "state file (default: outputs.state_file of the config)")
	tank := fs.String("tank", "", "tank id")
	at := fs.String("at", "", "time of the work, RFC 3339 or YYYY-MM-DD (UTC)")
	action := fs.String("action", "", "cleaned, repaired, replaced or sensor-calibrated")
	note := fs.String("note", "", "free text")
	id := fs.Uint64("id", 0, "record id (remove)")
	newState := fs.Bool("new-state", false, "add: create the state file if it does not exist (records entered before the first scan)")
	if err := parseFlags(e, fs, rest); err != nil {
		return err
	}
	if *cfgPath == "" {
		return &usageError{"maintenance: --config is required"}
	}
	cfg, err := config.LoadContext(ctx, *cfgPath)
	if err != nil {
		return err
	}
	path := *statePath
	if path == "" {
		path = cfg.Outputs.StateFile
	}
	st, err := openStore(path, *newState && verb == "add")
	if err != nil {
		return err
	}
	defer st.Close()
	switch verb {
	case "add":
		known := false
		for _, t := range cfg.Tanks {
			known = known || t.ID == *tank
		}
		if !known {
			return &usageError{fmt.Sprintf("maintenance add: --tank %q is not in %s", *tank, cfg.File)}
		}
		act, err := store.ParseAction(*action)
		if err != nil {
			return &usageError{"maintenance add: --action: " + err.Error()}
		}
		when, err := parseDay(*at)
		if err != nil {
			return &usageError{"maintenance add: --at: " + err.Error()}
		}
		n, err := st.AddMaintenance(store.Maintenance{Tank: *tank, AtNs: when.UnixNano(), Action: act, Note: *note})
		if err != nil {
			return err
		}
		fmt.Fprintf(e.stdout, "added maintenance record %d: %s %s at %s\n", n, *tank, act, when.Format(time.RFC3339))
	case "list":
		var tanks []string
		if *tank != "" {
			tanks = []string{*tank}
		} else {
			for _, t := range cfg.Tanks {
				tanks = append(tanks, t.ID)
			}
		}
		tw := tabwriter.NewWriter(e.stdout, 0, 4, 2, ' ', 0)
		fmt.Fprintln(tw, "ID\tTANK\tAT\tACTION\tNOTE")
		for _, t := range tanks {
			recs, err := st.Maintenance(t)
			if err != nil {
				return err
			}
			for _, m := range recs {
				note := m.Note
				if t := m.Test; t != nil {
					note = strings.TrimSpace(fmt.Sprintf("test to %s: K %.4g ± %.2g m^2.5/s (95 %%) from %d drains. %s",
						time.Unix(0, t.UntilNs).UTC().Format(time.RFC3339), t.KM25s, 1.96*t.KSEM25s, t.Drains, note))
				}
				fmt.Fprintf(tw, "%d\t%s\t%s\t%s\t%s\n", m.ID, m.Tank, time.Unix(0, m.AtNs).UTC().Format(time.RFC3339), m.Action, note)
			}
		}
		tw.Flush()
	case "remove":
		if *id == 0 {
			return &usageError{"maintenance remove: --id is required"}
		}
		if err := st.RemoveMaintenance(*id); err != nil {
			return err
		}
		fmt.Fprintf(e.stdout, "removed maintenance record %d\n", *id)
	default:
		return &usageError{fmt.Sprintf("maintenance: unknown action %q (want add, list or remove)", verb)}
	}
	return nil
}

func parseDay(s string) (time.Time, error) {
	if t, err := time.Parse(time.RFC3339, s); err == nil {
		return t.UTC(), nil
	}
	if t, err := time.Parse("2006-01-02", s); err == nil {
		return t, nil
	}
	return time.Time{}, fmt.Errorf("%q: want RFC 3339 or YYYY-MM-DD", s)
}

const studyAbout = `Runs one of the measured studies and prints its table (Markdown):

  accuracy   simulated drains of every shape, noise 0.5-5 mm, sampling 1-60 s,
             partial and complete: RMSE(K) over the Cramer-Rao bound, and bias;
             with -realistic, readings as real transmitters give them (AR(1)
             noise, sensor lag, counts, Cd varying with the Reynolds number):
             coverage of the 95 % intervals and the share graded usable
  detection  simulated histories of many tanks per fault kind and size:
             detection rate, delay, classification; healthy tanks with routine
             data gaps: false tank findings and feed notices per tank-year`

func runStudy(ctx context.Context, e *env, args []string) error {
	if len(args) == 0 || strings.HasPrefix(args[0], "-") {
		fs := newFlags(e, "study", "study accuracy|detection [flags]", studyAbout)
		if err := parseFlags(e, fs, args); err != nil {
			return err
		}
		return &usageError{"study: want accuracy or detection"}
	}
	kind := args[0]
	fs := newFlags(e, "study "+kind, "study "+kind+" [flags]", studyAbout)
	reps := fs.Int("n", 0, "replicates per cell (default: the study's own)")
	seed := fs.Uint64("seed", 1, "random seed")
	realistic := fs.Bool("realistic", false, "accuracy: the realistic-reading rows instead of the white-noise grid")
	if err := parseFlags(e, fs, args[1:]); err != nil {
		return err
	}
	switch kind {
	case "accuracy":
		if *realistic {
			rows := model.RealisticStudy(model.RealisticOptions{Seed: *seed, Replicates: *reps})
			fmt.Fprint(e.stdout, model.FormatRealisticTable(rows))
			break
		}
		rows := model.AccuracyStudy(model.AccuracyOptions{Seed: *seed, Replicates: *reps})
		fmt.Fprint(e.stdout, model.FormatAccuracyTable(rows))
	case "detection":
		rows := detect.Study(detect.StudyOptions{Seed: *seed, Tanks: *reps, HealthyTanks: *reps})
		fmt.Fprint(e.stdout, detect.FormatStudyTable(rows))
	default:
		return &usageError{fmt.Sprintf("study: unknown study %q (want accuracy or detection)", kind)}
	}
	return nil
}
