//go:build race

package main

// raceEnabled: the tests run under the race detector, five to ten times
// slower; the long studies shrink.
const raceEnabled = true
