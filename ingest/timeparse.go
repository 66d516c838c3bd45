package ingest

import (
	"errors"
	"fmt"
	"math"
	"time"
)

// Precision is the unit of numeric timestamps.
type Precision int

const (
	// PrecisionAuto: CSV decides per value by magnitude (see ReadOptions);
	// line protocol uses nanoseconds, its standard unit.
	PrecisionAuto Precision = iota
	PrecisionS
	PrecisionMs
	PrecisionUs
	PrecisionNs
)

// nsPer is the number of nanoseconds in one unit, with the number of
// fractional digits that resolve a nanosecond.
func (p Precision) nsPer() (mult int64, digits int) {
	switch p {
	case PrecisionS:
		return 1e9, 9
	case PrecisionMs:
		return 1e6, 6
	case PrecisionUs:
		return 1e3, 3
	default:
		return 1, 0
	}
}

func (p Precision) String() string {
	switch p {
	case PrecisionAuto:
		return "auto"
	case PrecisionS:
		return "s"
	case PrecisionMs:
		return "ms"
	case PrecisionUs:
		return "us"
	case PrecisionNs:
		return "ns"
	}
	return fmt.Sprintf("Precision(%d)", int(p))
}

// ParsePrecision reads "auto", "s", "ms", "us" (or "µs") and "ns".
func ParsePrecision(s string) (Precision, error) {
	switch s {
	case "", "auto":
		return PrecisionAuto, nil
	case "s":
		return PrecisionS, nil
	case "ms":
		return PrecisionMs, nil
	case "us", "µs":
		return PrecisionUs, nil
	case "ns":
		return PrecisionNs, nil
	}
	return 0, fmt.Errorf("ingest: unknown time precision %q (want auto, s, ms, us or ns)", s)
}

// Magnitude bounds of PrecisionAuto: an integer part below 1e11 is seconds,
// below 1e14 milliseconds, below 1e17 microseconds, otherwise nanoseconds.
// 1e11 s is the year 5138, and 1e11 ms is March 1973, so every time from 1973
// to 5138 is read right in every unit.
const (
	autoMaxS  = 1e11
	autoMaxMs = 1e14
	autoMaxUs = 1e17
)

var errTimeRange = errors.New("time outside 1677-09-21 .. 2262-04-11")

// parseTime reads an RFC 3339 time or a Unix number with an optional
// fraction, returning Unix nanoseconds. Digits finer than a nanosecond are
// truncated.
func parseTime(b []byte, prec Precision) (int64, error) {
	if len(b) == 0 {
		return 0, errors.New("empty time")
	}
	if isRFC3339ish(b) {
		t, err := time.Parse(time.RFC3339Nano, string(b))
		if err != nil {
			return 0, fmt.Errorf("time %s: not a number or RFC 3339 time", excerpt(b))
		}
		if y := t.Year(); y < 1677 || y > 2262 {
			return 0, errTimeRange
		}
		ns := t.UnixNano()
		if time.Unix(0, ns).Equal(t) {
			return ns, nil
		}
		return 0, errTimeRange
	}
	neg := false
	i := 0
	if b[0] == '-' || b[0] == '+' {
		neg = b[0] == '-'
		i = 1
	}
	start := i
	var ip uint64
	for ; i < len(b) && b[i] >= '0' && b[i] <= '9'; i++ {
		if ip > (math.MaxUint64-9)/10 {
			return 0, errTimeRange
		}
		ip = ip*10 + uint64(b[i]-'0')
	}
	intDigits := i - start
	var frac []byte
	if i < len(b) && b[i] == '.' {
		i++
		fs := i
		for ; i < len(b) && b[i] >= '0' && b[i] <= '9'; i++ {
		}
		frac = b[fs:i]
	}
	if i != len(b) || (intDigits == 0 && len(frac) == 0) {
		return 0, fmt.Errorf("time %s: not a number or RFC 3339 time", excerpt(b))
	}
	if prec == PrecisionAuto {
		switch {
		case ip < autoMaxS:
			prec = PrecisionS
		case ip < autoMaxMs:
			prec = PrecisionMs
		case ip < autoMaxUs:
			prec = PrecisionUs
		default:
			prec = PrecisionNs
		}
	}
	mult, digits := prec.nsPer()
	if ip > uint64(math.MaxInt64)/uint64(mult) {
		return 0, errTimeRange
	}
	ns := ip * uint64(mult)
	var f uint64
	scale := mult
	for k := 0; k < digits; k++ {
		scale /= 10
		if k < len(frac) {
			f += uint64(frac[k]-'0') * uint64(scale)
		}
	}
	ns += f
	if ns > math.MaxInt64 {
		return 0, errTimeRange
	}
	if neg {
		return -int64(ns), nil
	}
	return int64(ns), nil
}

// isRFC3339ish is true when b looks like a calendar time rather than a number.
func isRFC3339ish(b []byte) bool {
	for _, c := range b {
		if c == 'T' || c == 't' || c == ':' || c == 'Z' || c == 'z' {
			return true
		}
	}
	return len(b) > 4 && b[4] == '-'
}
