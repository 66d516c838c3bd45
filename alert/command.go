package alert

import (
	"bytes"
	"context"
	"fmt"
	"os/exec"
	"time"
)

// CommandNotifier runs Argv (no shell) once per batch of events with the
// webhook JSON document on its standard input. It is how a site hooks its own
// paging or ticketing tool in. The command gets 30 s.
type CommandNotifier struct {
	Argv []string
}

// Notify implements Notifier.
func (n CommandNotifier) Notify(ctx context.Context, evs []Event) error {
	if len(evs) == 0 || len(n.Argv) == 0 {
		return nil
	}
	buf, err := payload(evs)
	if err != nil {
		return fmt.Errorf("alert: command: %w", err)
	}
	ctx, cancel := context.WithTimeout(ctx, 30*time.Second)
	defer cancel()
	cmd := exec.CommandContext(ctx, n.Argv[0], n.Argv[1:]...)
	cmd.Stdin = bytes.NewReader(buf)
	// A hook that leaves a child holding stderr must not hold the scan.
	cmd.WaitDelay = 5 * time.Second
	var stderr bytes.Buffer
	cmd.Stderr = &stderr
	if err := cmd.Run(); err != nil {
		msg := stderr.String()
		if len(msg) > 200 {
			msg = msg[:200]
		}
		return fmt.Errorf("alert: command %s: %w: %s", n.Argv[0], err, msg)
	}
	return nil
}
