// Package scan carries each tank through one pass of the job: level
// series in, drains and idle periods cut by the segmenter (model), the
// outlet constant fitted per drain and screened for inflow (model), the
// tank's detector fed and evaluated at every midnight the data cross
// (detect), and the fits, idle periods, detector state and checkpoint
// committed to the state file in one transaction per window (store).
//
// A Run is one tank in one pass: Open loads its checkpoint and detector
// state (replaying the stored history when maintenance records changed or
// the state has another layout version), Feed takes its samples in time
// order in any chunking, Commit writes what is decided. The program wires
// sources, schedules and outputs around it; the package imports model,
// detect and store, never the configuration.
package scan
