package model

import (
	"errors"
	"fmt"
)

// FitFailure says why a drain could not be fitted.
type FitFailure int

// The reasons of a FitError.
const (
	FitBadInput      FitFailure = iota + 1 // mismatched slices, a nil or invalid tank, not a drain
	FitTooFewSamples                       // fewer usable samples than the model has parameters, plus one
	FitNotFalling                          // the level (or the volume balance) shows no outflow
)

var fitFailureNames = [...]string{"", "bad input", "too few samples", "not falling"}

func (r FitFailure) String() string {
	if r > 0 && int(r) < len(fitFailureNames) {
		return fitFailureNames[r]
	}
	return "unknown"
}

// FitError is the error of FitDrain: the reason, the tank and the detail.
type FitError struct {
	Reason FitFailure
	Tank   string
	Err    error
}

func (e *FitError) Error() string {
	if e.Tank == "" {
		return "model: fit: " + e.Err.Error()
	}
	return fmt.Sprintf("model: fit: tank %q: %v", e.Tank, e.Err)
}

func (e *FitError) Unwrap() error { return e.Err }

// FitFailureOf returns the reason of a FitDrain error (0 when err is not
// one).
func FitFailureOf(err error) FitFailure {
	var fe *FitError
	if errors.As(err, &fe) {
		return fe.Reason
	}
	return 0
}

// failure is an internal fit error with its reason, wrapped into a
// FitError by FitDrain.
type failure struct {
	reason FitFailure
	msg    string
}

func (f *failure) Error() string { return f.msg }

func failf(r FitFailure, format string, a ...any) error {
	return &failure{reason: r, msg: fmt.Sprintf(format, a...)}
}
