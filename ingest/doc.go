// Package ingest reads tank level histories from files and converts the raw
// sensor readings to head above the outlet, in metres.
//
// # Readers
//
// ReadFile streams one file line by line (never the whole file in memory;
// lines are capped at ReadOptions.MaxLineBytes, 1 MiB by default) and hands
// each accepted sample to a callback. Names ending in .gz are decompressed on
// the fly. Two formats are read:
//
//   - CSV with a header naming the columns time, tank and value (any order,
//     case-insensitive, other columns ignored; RFC 4180 quoting within a
//     line; lines starting with # are comments). Times are RFC 3339 or Unix
//     numbers, whose unit is configured or decided by magnitude (see
//     ReadOptions.Precision).
//   - InfluxDB line protocol, "measurement,tag=v field=v timestamp", with its
//     escapes, quoted string fields and integer (i) and unsigned (u) suffixes.
//     The measurement, the level field, an optional inflow field and the tank
//     tag are configured; the timestamp precision defaults to nanoseconds.
//
// Nothing in the input crashes the reader and no line vanishes unaccounted:
// every line is a sample, a header/comment/blank line, a line of another
// series, or a counted problem (out_of_order, duplicate_time, nan,
// empty_value, truncated, malformed, unknown_tank). The Report keeps the
// first five problems of each kind with their file and line.
//
// ReadSeries reads many files (glob patterns) into one model.Series per tank,
// keeping each tank's times strictly increasing and converting every reading
// to head with the tank's Sensor and outlet elevation.
//
// WriteCSV and WriteLineProtocol write the same formats; what they write reads
// back exactly (times to the nanosecond, values bit for bit).
//
// # Conversion
//
// A Sensor maps a raw reading r to the level above the vessel bottom:
//
//	depth sensor:    L = (r - r0) · u                 (u in m per unit)
//	percent of span: L = (r - r0) · S / 100           (S the span, m)
//	pressure sensor: L = (r - r0) · u / (ρ g_n)       (u in Pa per unit)
//	raw signal:      L = c(r), or c(r) / (ρ g_n) for a pressure transmitter
//
// where c is a Calibration (mA, V, counts: gain and offset, two points, or a
// table interpolated by a monotone cubic and extrapolated beyond its ends)
// and the head above the outlet is h = L - z_outlet. g_n = 9.80665 m/s^2
// (exact, 3rd CGPM 1901); ρ defaults to water at 20 °C, 998.2067 kg/m^3
// (Tanaka et al. 2001, Metrologia 38:301). Sensor.Reading is the inverse.
//
// # Concurrency
//
// The functions are safe to call concurrently on different inputs; a Report
// is a plain value. Callbacks run on the calling goroutine.
package ingest
