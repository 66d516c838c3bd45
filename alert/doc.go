// Package alert turns detector findings into things people act on: a
// lifecycle across runs (a finding is new, ongoing or cleared), notifications
// that fire once per transition (so re-running a scan over the same data never
// repeats an alert), a readable table, and, in alert/report, the weekly
// outlet-health report.
//
// Every notification and report carries the safety caution: draining or
// entering tanks, hazardous contents and overflow can hurt people; the
// program only advises and defers to local codes and licensed practice.
package alert

// Caution is the safety text attached to every alert and report.
const Caution = "Caution: draining, flushing or entering a tank can expose people to " +
	"hazardous contents, engulfment, confined-space atmospheres and overflow. " +
	"Follow your site's isolation, permit and confined-space procedures, local codes " +
	"and licensed practice; drainsight only advises and never replaces them."
