package main

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"time"

	"drainsight/config"
	"drainsight/store"
)

const stateAbout = `Look after the state file (fits, detector state, checkpoints, alert records,
maintenance records and the outbox of the tank's write-back and
notifications).

  drainsight state check --config F [--state P]
      bbolt's consistency check of every page and the checksum (CRC-32C) of
      every record; prints what is damaged. Exit status 0 when sound, 1 when
      damaged. Every scan also checks the file's header at open and refuses
      an empty, truncated or overwritten file with this advice.

  drainsight state backup --config F [--state P] --out FILE
      writes a consistent copy of the file while it stays in use (one read
      transaction; a running serve need not stop). Keep copies off the
      machine, with the outputs directory.

serve writes a copy a day after its first successful scan of the UTC day
(backups/state-YYYY-MM-DD.db beside the state file) and keeps the last 7.

Restoring: stop serve (or wait for the scan to end), copy the backup over the
state file, and run scan. Passes after the backup's time are re-read from
the sources from each tank's checkpoint, so nothing is lost that the sources
still hold; alert transitions after the backup are notified again, with the
same ids (receivers drop repeats on them).`

func runState(ctx context.Context, e *env, args []string) error {
	if len(args) == 0 || strings.HasPrefix(args[0], "-") {
		fs := newFlags(e, "state", "state check|backup [flags]", stateAbout)
		if err := parseFlags(e, fs, args); err != nil {
			return err
		}
		return &usageError{"state: want check or backup"}
	}
	verb, rest := args[0], args[1:]
	fs := newFlags(e, "state "+verb, "state "+verb+" [flags]", stateAbout)
	cfgPath := fs.String("config", "", "configuration file (required unless --state is given)")
	statePath := fs.String("state", "", "state file (default: outputs.state_file of the config)")
	out := fs.String("out", "", "backup: the file to write")
	if err := parseFlags(e, fs, rest); err != nil {
		return err
	}
	path := *statePath
	if path == "" {
		if *cfgPath == "" {
			return &usageError{"state: --config or --state is required"}
		}
		cfg, err := config.LoadContext(ctx, *cfgPath)
		if err != nil {
			return err
		}
		path = cfg.Outputs.StateFile
	}
	if _, err := os.Stat(path); err != nil {
		return fmt.Errorf("state %s: %w", verb, err)
	}
	st, err := store.Open(path, 0)
	if err != nil {
		return err
	}
	defer st.Close()
	switch verb {
	case "check":
		probs, n, err := st.Check()
		if err != nil {
			return err
		}
		if len(probs) == 0 {
			fmt.Fprintf(e.stdout, "%s: sound (%d records, every page and checksum verified).\n", path, n)
			return nil
		}
		for _, p := range probs {
			fmt.Fprintf(e.stdout, "DAMAGED %s: %s\n", p.Where, p.What)
		}
		return fmt.Errorf("%w: %s: %d problems in %d records; restore a backup (drainsight state --help)", store.ErrDamaged, path, len(probs), n)
	case "backup":
		if *out == "" {
			return &usageError{"state backup: --out is required"}
		}
		tmp, err := os.CreateTemp(filepath.Dir(*out), ".backup-*")
		if err != nil {
			return err
		}
		n, err := st.Backup(tmp)
		if cerr := tmp.Close(); err == nil {
			err = cerr
		}
		if err == nil {
			err = os.Rename(tmp.Name(), *out)
		}
		if err != nil {
			os.Remove(tmp.Name())
			return fmt.Errorf("state backup: %w", err)
		}
		fmt.Fprintf(e.stdout, "Wrote %s (%d bytes), a consistent copy of %s.\n", *out, n, path)
		return nil
	}
	return &usageError{fmt.Sprintf("state: unknown verb %q (want check or backup)", verb)}
}

// keepBackups is how many daily copies of the state file serve keeps.
const keepBackups = 7

// dailyBackup writes today's copy of the state file (UTC day) into the
// backups directory beside it, unless there is one already, and keeps the
// newest keepBackups copies. serve runs it after each successful scan.
func dailyBackup(statePath string, now time.Time) (string, error) {
	dir := filepath.Join(filepath.Dir(statePath), "backups")
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return "", err
	}
	name := filepath.Join(dir, "state-"+now.UTC().Format("2006-01-02")+".db")
	if _, err := os.Stat(name); err == nil {
		return "", nil
	}
	st, err := store.Open(statePath, 0)
	if err != nil {
		return "", err
	}
	tmp, err := os.CreateTemp(dir, ".backup-*")
	if err == nil {
		_, err = st.Backup(tmp)
		if cerr := tmp.Close(); err == nil {
			err = cerr
		}
		if err == nil {
			err = os.Rename(tmp.Name(), name)
		}
		if err != nil {
			os.Remove(tmp.Name())
		}
	}
	if cerr := st.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		return "", fmt.Errorf("daily backup of %s: %w", statePath, err)
	}
	old, _ := filepath.Glob(filepath.Join(dir, "state-????-??-??.db"))
	sort.Strings(old) // the dates sort as the names do
	for len(old) > keepBackups {
		os.Remove(old[0])
		old = old[1:]
	}
	return name, nil
}
