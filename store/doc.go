// Package store keeps drainsight's durable state in one bbolt file: per tank,
// the accepted drain fits, the idle-period fits, the detector's state blob and
// a checkpoint of how far the history has been analysed; and, across tanks,
// maintenance records, alert lifecycle records and the last run of each job.
//
// The central operation is [Store.CommitTank]: it writes one tank's new fits,
// idle fits, detector state and checkpoint in a single bbolt transaction, so a
// scan killed at any instant leaves either the whole commit or none of it.
// Fits and idle fits are keyed by their EndNs (big-endian, sign-flipped so the
// byte order is the time order), so committing the same drain again overwrites
// it instead of adding a duplicate: re-running a scan or a backfill over the
// same history is idempotent.
//
// Layout (bucket names are stable; the values are JSON):
//
//	tanks/<tank>/fits        key be(EndNs)  -> model.Fit
//	tanks/<tank>/idle        key be(EndNs)  -> model.IdleFit
//	tanks/<tank>/meta        "checkpoint"   -> Checkpoint
//	                         "detector"     -> opaque bytes from the caller
//	                         "feed"         -> opaque bytes from the caller (the feed status)
//	maintenance              key be(id)     -> Maintenance
//	alerts                   tank\x00kind\x00subtype -> opaque bytes
//	runs                     job name       -> JobRun
//	transitions              tank\x00be(AtNs)id -> opaque bytes (alert transitions, kept for export)
//
// Non-finite floats (model.Fit.Cd and EmptyHeadM are NaN when unknown) are
// stored as the JSON strings "NaN", "+Inf" and "-Inf", which plain
// encoding/json refuses to write.
//
// # Concurrency
//
// A *Store is safe for concurrent use by many goroutines: bbolt serialises
// write transactions and lets read transactions run in parallel. Every value
// returned is a copy that the caller owns. Only one *Store (one process, and
// one Open within a process) can hold the file at a time; a second Open waits
// for the lock up to its timeout and then fails with an error that names the
// file and wraps [ErrLocked]. Store methods do no network I/O inside a
// transaction, and callers must not either (pull from InfluxDB first, then
// commit).
//
// Durability uses bbolt's defaults (fdatasync on every commit); a commit costs
// two syncs, so batch a tank's results into one CommitTank per scan window
// rather than one per fit.
package store
