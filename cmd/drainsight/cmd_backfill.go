package main

import (
	"context"
	"fmt"
	"io"
	"os"
	"strings"
	"time"

	"drainsight/config"
)

const backfillAbout = `Processes months of InfluxDB history window by window (one query per
window and site, a day by default), committing every tank after each window.
Interrupted, it resumes from the tanks' checkpoints when run again: no drain
is lost or fitted twice. A tank that already has a checkpoint (from an
earlier scan or backfill) continues from it; --since applies to tanks without
one. To bring in history older than a tank's first scan, add --reanalyse: it
forgets every tank's fits, statistics and checkpoint (maintenance records and
alert states are kept) and analyses again from --since. Shows a progress bar
on a terminal and a log line per window otherwise. File sources are read as
by scan.`

func runBackfill(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "backfill", "backfill --config FILE --since DATE [--until DATE] [--out DIR]", backfillAbout)
	cfgPath := fs.String("config", "", "configuration file (required)")
	shardFlag := fs.String("shard", "", shardUsage)
	since := fs.String("since", "", "start of the history, RFC 3339 or YYYY-MM-DD (required)")
	until := fs.String("until", "", "end of the history (default: now minus the settle delay)")
	outDir := fs.String("out", "", "output directory (default: outputs.directory of the config)")
	statePath := fs.String("state", "", "state file (default: outputs.state_file of the config)")
	reanalyse := fs.Bool("reanalyse", false, "forget the tanks' analysis state first and start again from --since")
	verbose := fs.Bool("v", false, "debug logging")
	newState := fs.Bool("new-state", false, newStateUsage)
	if err := parseFlags(e, fs, args); err != nil {
		return err
	}
	if *cfgPath == "" || *since == "" {
		return &usageError{"backfill: --config and --since are required"}
	}
	from, err := parseDay(*since)
	if err != nil {
		return &usageError{"backfill: --since: " + err.Error()}
	}
	opt := scanOptions{sinceNs: from.UnixNano(), reanalyse: *reanalyse, newState: *newState}
	if *until != "" {
		to, err := parseDay(*until)
		if err != nil {
			return &usageError{"backfill: --until: " + err.Error()}
		}
		opt.untilNs = to.UnixNano()
		opt.now = to
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
	last := time.Time{}
	opt.progress = func(done, total int, what string) {
		if isTerminal(e.stderr) {
			width := 40
			n := width * done / max(total, 1)
			fmt.Fprintf(e.stderr, "\r[%s%s] %d/%d %s ", strings.Repeat("#", n), strings.Repeat(".", width-n), done, total, what)
			if done == total {
				fmt.Fprintln(e.stderr)
			}
			return
		}
		if done == total || time.Since(last) > 10*time.Second {
			last = time.Now()
			log.Info("backfill progress", "done", done, "total", total, "at", what)
		}
	}
	res, err := scanOnce(ctx, e, cfg, *outDir, *statePath, opt, log)
	if err != nil {
		return err
	}
	return errTankFailures(res.failed())
}

func isTerminal(w io.Writer) bool {
	f, ok := w.(*os.File)
	if !ok {
		return false
	}
	st, err := f.Stat()
	return err == nil && st.Mode()&os.ModeCharDevice != 0
}
