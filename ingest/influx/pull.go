package influx

import (
	"context"
	"fmt"
	"strings"
	"time"
)

// SeriesSpec says which series hold the tank levels.
type SeriesSpec struct {
	Measurement string            // e.g. "tank_level"
	Field       string            // e.g. "level"
	TankTag     string            // the tag that holds the tank id; default "tank"
	Tags        map[string]string // extra tag equality filters, e.g. {"site": "plant-a"}
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
	return &Source{c: c, bucket: c.conn.Bucket, spec: spec}, nil
}

// Flux returns the query text Pull sends for one window (for logs and
// debugging; it holds no secret).
func (s *Source) Flux(tanks []string, startNs, stopNs int64) string {
	return s.pullFlux(tanks, startNs, stopNs)
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
	flux := s.pullFlux(tanks, startNs, stopNs)
	marks := make(map[string]*tankMark)
	tag := s.spec.TankTag
	op := fmt.Sprintf("query %s..%s", fluxTime(startNs), fluxTime(stopNs))
	err = s.c.retry(ctx, op, s.c.opt.QueryTimeout, func(ctx context.Context) error {
		for _, m := range marks {
			m.runSet = false
		}
		body, err := s.c.openQuery(ctx, flux)
		if err != nil {
			return err
		}
		defer body.Close()
		rows := newCSVRows(body, tag)
		var cur *tankMark
		for {
			tank, t, v, ok, err := rows.next()
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
			add(cur.name, t, v)
			n++
		}
	})
	return n, err
}
