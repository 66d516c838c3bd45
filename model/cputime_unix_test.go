//go:build unix

package model_test

import (
	"syscall"
	"time"
)

// processCPU returns the user+system CPU time of the process so far, so that
// a benchmark on a shared machine can report a rate that other load does not
// inflate.
func processCPU() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}
