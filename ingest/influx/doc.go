// Package influx reads tank level histories from InfluxDB and writes fits and
// findings back. It speaks the /api/v2 endpoints, which serve both InfluxDB
// 2.x (API token, org, bucket) and 1.8 with Flux enabled (token
// "user:password" or "" without auth, bucket "db/rp" or "db", org ignored).
// Requests go through github.com/influxdata/influxdb-client-go/v2 (its HTTP
// service for queries, its blocking write API for writes), so headers, auth
// and HTTP error decoding are the library's; query results are parsed by this
// package's own streaming reader (see below).
//
// # Reading
//
// A [Source] pulls one measurement/field for a set of tanks, one query per
// bounded time window: the caller splits the history with [Windows] and calls
// [Source.Pull] for each window in turn, committing its checkpoint after each.
// Pull streams the annotated CSV response and hands every sample to a
// callback. The response is read by a reader of its own rather than the
// library's QueryTableResult, which builds a map per row and was 35-70 times
// slower than the download: it splits records eight bytes at a time, converts
// only the time, value and tank cells (located by name in each table's
// header), parses the "2006-01-02T15:04:05.999999999Z" times Flux writes and
// short decimals by hand (falling back to time.Parse and strconv), and
// allocates nothing per row. [Source.PullWithInflow] reads a second field of the same
// measurement (SeriesSpec.InflowField, an inflow flowmeter) beside the level
// in the same query: the two fields are pivoted on _field right after the
// filters, so each row carries both values in columns named after the
// fields, and an inflow missing at a level's time reads NaN. In-band error tables come back as errors.
// Query results are requested uncompressed unless Options.QueryGzip is set.
// Samples stamped exactly at the window's stop are dropped, because
// range() includes its stop on 1.8 and excludes it on 2.x, so consecutive
// windows [a, b), [b, c) neither lose nor double a point on either server.
//
// The Flux text is built by hand (query parameters are a Cloud-only feature):
// every string literal is escaped (\ " ${ and control characters), every
// regular expression literal is built from regexp.QuoteMeta with '/' escaped,
// and measurement, field and tag names go through the same escaping, so a tank
// id can hold any character without changing the query.
//
// # Retries and errors
//
// Every query and every write batch is retried with exponential backoff and
// jitter when the failure is transient: no HTTP status (refused, reset,
// timed out), 429 (waiting at least its Retry-After), and 5xx other than the
// 1.8 answers that mean a wrong database or retention policy. A Pull that
// fails mid-stream resumes after the last sample it delivered, so a retried
// window still delivers every sample exactly once. Authentication and
// addressing failures (401, 403, 404, and 1.8's "no database" / "retention
// policy" 500s) are returned at once as a *[ConfigError] whose message names
// the setting to fix: token, org or bucket. Exhausted retries wrap
// [ErrUnavailable].
//
// # Writing
//
// [Client.WriteFits], [Client.WritePoints] and [Client.WriteLevels] send
// explicit batches through the blocking write API with the same retry policy.
// Timestamps are deterministic (a fit is stamped with its drain's end), tags
// are stable, and all numeric fields are float64, so writing the same results
// again overwrites them instead of adding points. Non-finite values are
// skipped (line protocol cannot carry them).
//
// # Connections and secrets
//
// Use one [Client] per server for the whole process and Close it at shutdown.
// The client uses its own *http.Client without an overall timeout, since
// http.Client.Timeout would cut long result streams; each query and write
// attempt is bounded by a context deadline instead. The token is never
// logged: [Conn.String] redacts it, and the library's global logger is left
// at its default (errors only), which does not print request headers.
//
// A *Client, and the *Source values it returns, are safe for concurrent use.
package influx
