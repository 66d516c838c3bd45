package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"strings"
)

// errHelpShown is returned after --help printed the usage: exit status 0.
var errHelpShown = errors.New("help shown")

// usageError marks a mistake on the command line: exit status 2.
type usageError struct{ msg string }

func (e *usageError) Error() string { return e.msg }

func exitCode(err error) int {
	var ue *usageError
	switch {
	case err == nil, errors.Is(err, errHelpShown):
		return 0
	case errors.As(err, &ue):
		return 2
	case errors.Is(err, errFindings):
		return 3
	}
	return 1
}

// errFindings is returned by scan --fail-on-findings when a finding is active.
var errFindings = errors.New("active findings")

const topUsage = `drainsight watches the outlets of gravity-drained tanks.

It reads tank level histories (CSV, line-protocol files or InfluxDB), cuts out
each gravity drain, fits the outlet constant K of q = K*sqrt(h) with its
uncertainty, tracks K against each tank's own baseline and reports restrictions
(fouling, blockage), excess outflow (erosion, downstream leaks), tank leaks and
level-sensor faults.

Usage:
  drainsight <command> [flags]

Commands:
  demo          run the whole job on the embedded demo plant
  scan          one pass of the job over the configured sources
  backfill      process months of InfluxDB history window by window (resumable)
  serve         run scans and the weekly report on their cron schedules
  report        write the outlet-health report from the stored state
  check         validate a config file and say what would be read
  maintenance   add, list or remove maintenance records (they reset baselines)
  state         check the state file for damage, or back it up
  plan-test     plan a commissioning drain test that pins K to a precision
  commission    judge a commissioning drain test against the outlet
  export        write a tank's stored fits or finding transitions (CSV or JSON lines)
  study         run the accuracy or detection study and print its table
  help          show this text, or "help <command>"

Run "drainsight <command> --help" for the flags of a command.
Draining or entering tanks can hurt people: follow your site's procedures,
local codes and licensed practice; drainsight only advises.
`

type command struct {
	name  string
	short string
	run   func(ctx context.Context, e *env, args []string) error
}

// env carries what every command writes to.
type env struct {
	stdout, stderr io.Writer
}

func commands() []command {
	return []command{
		{"demo", "run the whole job on the embedded demo plant", runDemo},
		{"scan", "one pass of the job over the configured sources", runScan},
		{"backfill", "process InfluxDB history window by window", runBackfill},
		{"serve", "run scans and reports on their schedules", runServe},
		{"report", "write the outlet-health report from the stored state", runReport},
		{"check", "validate a config file", runCheck},
		{"maintenance", "add, list or remove maintenance records", runMaintenance},
		{"state", "check the state file for damage, or back it up", runState},
		{"plan-test", "plan a commissioning drain test that pins K to a precision", runPlanTest},
		{"commission", "judge a commissioning drain test against the outlet", runCommission},
		{"export", "write a tank's stored fits or finding transitions as CSV or JSON lines", runExport},
		{"study", "run the accuracy or detection study", runStudy},
	}
}

// run is the whole program behind main: it parses args and runs one command.
func run(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	e := &env{stdout: stdout, stderr: stderr}
	if len(args) == 0 {
		fmt.Fprint(stderr, topUsage)
		return &usageError{"no command given"}
	}
	name, rest := args[0], args[1:]
	switch name {
	case "help", "-h", "-help", "--help":
		if len(rest) > 0 {
			return run(ctx, []string{rest[0], "--help"}, stdout, stderr)
		}
		fmt.Fprint(stdout, topUsage)
		return errHelpShown
	}
	for _, c := range commands() {
		if c.name == name {
			return c.run(ctx, e, rest)
		}
	}
	fmt.Fprint(stderr, topUsage)
	return &usageError{fmt.Sprintf("unknown command %q", name)}
}

// newFlags builds a flag set whose --help prints the command's usage to stdout.
func newFlags(e *env, name, synopsis, about string) *flag.FlagSet {
	fs := flag.NewFlagSet(name, flag.ContinueOnError)
	fs.SetOutput(e.stderr)
	fs.Usage = func() {
		w := fs.Output()
		fmt.Fprintf(w, "Usage: drainsight %s\n\n%s\n\nFlags:\n", synopsis, strings.TrimSpace(about))
		fs.PrintDefaults()
	}
	return fs
}

// parseFlags parses args; --help prints the usage on stdout and returns errHelpShown.
func parseFlags(e *env, fs *flag.FlagSet, args []string) error {
	for _, a := range args {
		if a == "-h" || a == "-help" || a == "--help" {
			fs.SetOutput(e.stdout)
			fs.Usage()
			return errHelpShown
		}
	}
	if err := fs.Parse(args); err != nil {
		return &usageError{err.Error()}
	}
	if fs.NArg() > 0 {
		return &usageError{fmt.Sprintf("%s: unexpected argument %q", fs.Name(), fs.Arg(0))}
	}
	return nil
}
