package influx

import (
	"context"
	"fmt"
	"io"
	"math"
	"strings"
	"time"
)

// SeriesSpec says which series hold the tank levels.
type SeriesSpec struct {
	Measurement string            // e.g. "tank_level"
	Field       string            // e.g. "level"
	TankTag     string            // the tag that holds the tank id; default "tank"
	Tags        map[string]string // extra tag equality filters, e.g. {"site": "plant-a"}
	// InflowField is the field of the same measurement that holds an inflow
	// flowmeter's readings, read beside Field by PullWithInflow; "" for none.
	// When set, Field and InflowField become column names of a pivoted
	// result, so they must differ from each other, from the tank tag and the
	// Tags keys, must not start with '_', and must not be "result" or
	// "table" (the columns of the result format itself).
	InflowField string
}

// Source pulls level samples of one SeriesSpec. It is safe for concurrent use.
type Source struct {
	c      *Client
	bucket string
	spec   SeriesSpec
}

// Source returns a reader of spec's series from the client's bucket.
func (c *Client) Source(spec SeriesSpec) (*Source, error) {
	if spec.TankTag == "" {
		spec.TankTag = "tank"
	}
	if spec.Measurement == "" || spec.Field == "" {
		return nil, fmt.Errorf("influx: source: measurement %q and field %q must both be set", spec.Measurement, spec.Field)
	}
	if strings.HasPrefix(spec.TankTag, "_") {
		return nil, fmt.Errorf("influx: source: tank tag %q: names starting with '_' are Flux columns, not tags", spec.TankTag)
	}
	tags := make(map[string]string, len(spec.Tags))
	for k, v := range spec.Tags {
		if k == "" || strings.HasPrefix(k, "_") || k == spec.TankTag {
			return nil, fmt.Errorf("influx: source: tag filter %q: want a tag name other than the tank tag, not starting with '_'", k)
		}
		tags[k] = v
	}
	spec.Tags = tags
	if f := spec.InflowField; f != "" {
		for _, name := range []string{spec.Field, f} {
			if strings.HasPrefix(name, "_") || name == "result" || name == "table" || name == spec.TankTag {
				return nil, fmt.Errorf("influx: source: field %q: with an inflow field, field names become columns: want a name not starting with '_', other than \"result\", \"table\" and the tank tag %q", name, spec.TankTag)
			}
			if _, ok := spec.Tags[name]; ok {
				return nil, fmt.Errorf("influx: source: field %q: with an inflow field, field names become columns: want a name other than the tag filter %q", name, name)
			}
		}
		if f == spec.Field {
			return nil, fmt.Errorf("influx: source: inflow field %q: want a field other than the level field", f)
		}
	}
	return &Source{c: c, bucket: c.conn.Bucket, spec: spec}, nil
}

// Flux returns the query text Pull sends for one window (for logs and
// debugging; it holds no secret).
func (s *Source) Flux(tanks []string, startNs, stopNs int64) string {
	return s.pullFlux(tanks, startNs, stopNs)
}

// FluxWithInflow returns the query text PullWithInflow sends for one window.
func (s *Source) FluxWithInflow(tanks []string, startNs, stopNs int64) string {
	if s.spec.InflowField == "" {
		return s.pullFlux(tanks, startNs, stopNs)
	}
	return s.pullInflowFlux(tanks, startNs, stopNs)
}

// Windows splits [startNs, stopNs) into consecutive half-open windows of the
// given width; the last one ends at stopNs. It returns nil when stopNs <=
// startNs, and one window when width <= 0.
func Windows(startNs, stopNs int64, width time.Duration) [][2]int64 {
	if stopNs <= startNs {
		return nil
	}
	w := int64(width)
	if w <= 0 {
		return [][2]int64{{startNs, stopNs}}
	}
	out := make([][2]int64, 0, (stopNs-startNs)/w+1)
	for t := startNs; t < stopNs; {
		end := stopNs
		if stopNs-t > w { // no overflow: t < stopNs
			end = t + w
		}
		out = append(out, [2]int64{t, end})
		t = end
	}
	return out
}

// tankMark remembers what was delivered for one tank, so that a retried
// query skips it.
type tankMark struct {
	name   string
	has    bool  // something was delivered
	lastNs int64 // time of the last delivered sample
	atLast int   // samples delivered at lastNs (several series may share a time)
	runSet bool  // this attempt has seen a sample of the tank
	runNs  int64 // this attempt: time of the current sample
	runK   int   // this attempt: index of the current sample among those at runNs
}

// Pull runs one query for the window [startNs, stopNs) and calls add for each
// numeric sample of the given tanks (all tanks when tanks is empty), in time
// order within each tank; tanks follow one another. It returns how many
// samples it delivered.
//
// Samples exactly at stopNs are dropped, so consecutive windows join without
// loss or overlap on 1.8 (inclusive range stop) and 2.x (exclusive). Integer
// and float fields are both accepted; strings, booleans and nulls are
// skipped. Each attempt is bounded by Options.QueryTimeout. A transient
// failure, before or in the middle of the stream, is retried per
// Options.Retry and the retry skips what was already delivered, so every
// sample reaches add exactly once even across retries. add must not block for
// long: the response is streaming while it runs.
func (s *Source) Pull(ctx context.Context, tanks []string, startNs, stopNs int64,
	add func(tank string, tNs int64, value float64)) (n int, err error) {
	if stopNs <= startNs {
		return 0, nil
	}
	open, rows := s.query(tanks, startNs, stopNs, false)
	return s.pull(ctx, open, rows, startNs, stopNs,
		func(tank string, tNs int64, v, _ float64) { add(tank, tNs, v) })
}

// PullWithInflow is Pull for a tank with an inflow flowmeter: one query per
// window returns the level field and SeriesSpec.InflowField side by side
// (pivoted on _field, so one row per time and series), and add is called for
// every row with a level value, with inflow NaN when that row has no inflow
// value (inflow readings at times without a level reading are not
// delivered). Level and inflow are each accepted as integer or float fields;
// an inflow field of another type reads NaN. Without an InflowField it runs
// Pull's query and inflow is always NaN. Everything Pull guarantees holds:
// time order within a tank, samples at stopNs dropped, retries that resume
// after the last delivered row, typed errors.
func (s *Source) PullWithInflow(ctx context.Context, tanks []string, startNs, stopNs int64,
	add func(tank string, tNs int64, level, inflow float64)) (n int, err error) {
	if stopNs <= startNs {
		return 0, nil
	}
	if s.spec.InflowField == "" {
		open, rows := s.query(tanks, startNs, stopNs, false)
		return s.pull(ctx, open, rows, startNs, stopNs,
			func(tank string, tNs int64, v, _ float64) { add(tank, tNs, v, math.NaN()) })
	}
	open, rows := s.query(tanks, startNs, stopNs, true)
	return s.pull(ctx, open, rows, startNs, stopNs, add)
}

// pairRows is a result stream: one sample (and a second value) per call.
type pairRows interface {
	nextPair() (tank []byte, tNs int64, v, aux float64, ok bool, err error)
}

// query returns how to send the window's query in the client's language and
// how to read its result.
func (s *Source) query(tanks []string, startNs, stopNs int64, inflow bool) (func(context.Context) (io.ReadCloser, error), func(io.Reader) pairRows) {
	if s.c.opt.Language == LanguageInfluxQL {
		q := s.InfluxQL(tanks, startNs, stopNs, inflow)
		aux := ""
		if inflow {
			aux = s.spec.InflowField
		}
		return func(ctx context.Context) (io.ReadCloser, error) { return s.c.openInfluxQL(ctx, q) },
			func(body io.Reader) pairRows { return newQLRows(body, s.spec.TankTag, s.spec.Field, aux) }
	}
	flux := s.pullFlux(tanks, startNs, stopNs)
	rows := func(body io.Reader) pairRows { return newCSVRows(body, s.spec.TankTag) }
	if inflow {
		flux = s.pullInflowFlux(tanks, startNs, stopNs)
		rows = func(body io.Reader) pairRows {
			return newCSVPairRows(body, s.spec.TankTag, s.spec.Field, s.spec.InflowField)
		}
	}
	return func(ctx context.Context) (io.ReadCloser, error) { return s.c.openQuery(ctx, flux) }, rows
}

// pull runs the query with retries and hands each row that rows returns in
// [startNs, stopNs) to add once, resuming after the last delivered row when
// an attempt fails mid-stream.
func (s *Source) pull(ctx context.Context, open func(context.Context) (io.ReadCloser, error), newRows func(io.Reader) pairRows, startNs, stopNs int64,
	add func(tank string, tNs int64, v, aux float64)) (n int, err error) {
	marks := make(map[string]*tankMark)
	op := fmt.Sprintf("Flux query (/api/v2/query) %s..%s", fluxTime(startNs), fluxTime(stopNs))
	if s.c.opt.Language == LanguageInfluxQL {
		op = fmt.Sprintf("InfluxQL query (/query) %s..%s", fluxTime(startNs), fluxTime(stopNs))
	}
	err = s.c.retry(ctx, op, s.c.opt.QueryTimeout, func(ctx context.Context) error {
		for _, m := range marks {
			m.runSet = false
		}
		body, err := open(ctx)
		if err != nil {
			return err
		}
		defer body.Close()
		rows := newRows(body)
		var cur *tankMark
		for {
			tank, t, v, a, ok, err := rows.nextPair()
			if err != nil {
				return err
			}
			if !ok {
				return nil
			}
			if t >= stopNs || t < startNs {
				continue
			}
			if cur == nil || string(tank) != cur.name {
				cur = marks[string(tank)] // no allocation: map index by string(bytes)
				if cur == nil {
					cur = &tankMark{name: string(tank)}
					marks[cur.name] = cur
				}
			}
			if cur.runSet && t == cur.runNs {
				cur.runK++
			} else {
				cur.runSet, cur.runNs, cur.runK = true, t, 0
			}
			if cur.has && (t < cur.lastNs || (t == cur.lastNs && cur.runK < cur.atLast)) {
				continue // delivered by an earlier attempt
			}
			if cur.has && t == cur.lastNs {
				cur.atLast++
			} else {
				cur.has, cur.lastNs, cur.atLast = true, t, 1
			}
			add(cur.name, t, v, a)
			n++
		}
	})
	return n, err
}
