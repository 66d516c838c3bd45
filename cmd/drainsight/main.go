// Command drainsight watches the outlets of gravity-drained tanks: it reads
// level histories, cuts out each gravity drain, fits the square-root-law outlet
// constant with its uncertainty and flags statistically significant shifts.
//
// main stays thin: it builds the signal context and calls run, which does the
// work and is what the tests call.
package main

import (
	"context"
	"errors"
	"fmt"
	"os"
	"os/signal"
	"syscall"
)

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	err := run(ctx, os.Args[1:], os.Stdout, os.Stderr)
	stop()
	if err != nil {
		if !errors.Is(err, errHelpShown) {
			fmt.Fprintln(os.Stderr, "drainsight:", err)
		}
		os.Exit(exitCode(err))
	}
}
