package influx

import (
	"context"
	"errors"
	"fmt"
	"maps"
	"math"
	"slices"
	"time"

	"github.com/influxdata/influxdb-client-go/v2/api/write"

	"drainsight/model"
)

// Point is one point for WritePoints. Numeric fields are float64 (a field's
// type is fixed by its first write, so never mix in integers); non-finite
// values are left out, and a point left with no field at all is skipped.
// StringFields carry labels that must not become tags. TimeNs is required and
// should be deterministic (for example the end of the drain a finding is
// about), so that writing the same finding again overwrites it.
type Point struct {
	Measurement  string
	Tags         map[string]string
	Fields       map[string]float64
	StringFields map[string]string
	TimeNs       int64
}

// lineSafe reports why s cannot travel as a line-protocol name, tag key, tag
// value or field key through the client's encoder and come back unchanged
// from 1.8: control characters are written as two-character escapes that the
// server does not undo, and a backslash just before ',', ' ', '=' or at the
// end makes the encoder's escape (or the separator after the value) ambiguous;
// 1.8 then refuses the line or splits it elsewhere (checked against 1.8.10 in
// the integration tests).
func lineSafe(s string) error {
	if s == "" {
		return errors.New("is empty")
	}
	for i := 0; i < len(s); i++ {
		c := s[i]
		if c < 0x20 || c == 0x7f {
			return fmt.Errorf("contains control character %q at byte %d", c, i)
		}
		if c == '\\' && (i == len(s)-1 || s[i+1] == ',' || s[i+1] == ' ' || s[i+1] == '=') {
			return fmt.Errorf("has a backslash at byte %d before a separator or the end (line protocol cannot carry it)", i)
		}
	}
	return nil
}

func (p *Point) toWrite() (*write.Point, error) {
	if err := lineSafe(p.Measurement); err != nil {
		return nil, fmt.Errorf("measurement %q %w", p.Measurement, err)
	}
	// Keys in sorted order: the line is then deterministic, and sorted tags
	// are what the server stores anyway.
	wp := write.NewPointWithMeasurement(p.Measurement).SetTime(time.Unix(0, p.TimeNs))
	for _, k := range slices.Sorted(maps.Keys(p.Tags)) {
		v := p.Tags[k]
		if err := lineSafe(k); err != nil {
			return nil, fmt.Errorf("tag key %q %w", k, err)
		}
		if err := lineSafe(v); err != nil {
			return nil, fmt.Errorf("tag %s value %q %w", k, v, err)
		}
		wp.AddTag(k, v)
	}
	keys := slices.AppendSeq(slices.Collect(maps.Keys(p.Fields)), maps.Keys(p.StringFields))
	slices.Sort(keys)
	nf := 0
	for i, k := range keys {
		if i > 0 && keys[i-1] == k {
			return nil, fmt.Errorf("field %q is both numeric and string", k)
		}
		if err := lineSafe(k); err != nil {
			return nil, fmt.Errorf("field key %q %w", k, err)
		}
		if v, ok := p.Fields[k]; ok {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				continue
			}
			wp.AddField(k, v)
		} else {
			wp.AddField(k, p.StringFields[k])
		}
		nf++
	}
	if nf == 0 {
		return nil, nil
	}
	return wp, nil
}

// WritePoints writes pts in batches of Options.BatchSize, each batch one
// request retried per Options.Retry. It stops at the first batch that fails
// for good; batches before it are written. A point that cannot be encoded is
// an error naming it, and nothing is sent.
func (c *Client) WritePoints(ctx context.Context, pts []Point) error {
	wps := make([]*write.Point, 0, len(pts))
	for i := range pts {
		wp, err := pts[i].toWrite()
		if err != nil {
			return fmt.Errorf("influx: write: point %d (%s at %s): %w", i, pts[i].Measurement, fluxTime(pts[i].TimeNs), err)
		}
		if wp != nil {
			wps = append(wps, wp)
		}
	}
	return c.writeBatches(ctx, "write", wps)
}

// writeBatches sends wps in batches; what names the data in errors.
func (c *Client) writeBatches(ctx context.Context, what string, wps []*write.Point) error {
	for from := 0; from < len(wps); from += c.opt.BatchSize {
		batch := wps[from:min(from+c.opt.BatchSize, len(wps))]
		op := fmt.Sprintf("%s, points %d..%d", what, from, from+len(batch)-1)
		if err := c.retry(ctx, op, c.opt.WriteTimeout, func(ctx context.Context) error {
			return c.write.WritePoint(ctx, batch...)
		}); err != nil {
			return err
		}
	}
	return nil
}

// FitFields lists the float64 fields WriteFits writes, with their units. It
// is part of the output schema: dashboards and the findings writer rely on
// these names.
var FitFields = []string{
	"k_m25s", "k_se_m25s", "k_lo95_m25s", "k_hi95_m25s", "sigma_m", "r2",
	"exponent", "exponent_se", "durbin_watson", "datum_m", "h0_m", "h1_m",
	"n_points", "outliers", "duration_s", "cda_m2", "cd", "empty_head_m", "complete",
}

// FitPoint converts one fit to a point stamped at the drain's end, with tag
// tank (and site when not empty), the FitFields (NaN ones left out) and the
// string fields method, quality and quality_reason.
func FitPoint(measurement string, f *model.Fit, site string) Point {
	tags := map[string]string{"tank": f.Tank}
	if site != "" {
		tags["site"] = site
	}
	complete := 0.0
	if f.Complete {
		complete = 1
	}
	vals := []float64{
		f.KM25s, f.KSEM25s, f.KLo95M25s, f.KHi95M25s, f.SigmaM, f.R2,
		f.Exponent, f.ExponentSE, f.DurbinWatson, f.DatumM, f.H0M, f.H1M,
		float64(f.N), float64(f.Outliers), float64(f.EndNs-f.StartNs) / 1e9, f.CdAM2, f.Cd, f.EmptyHeadM, complete,
	}
	fields := make(map[string]float64, len(FitFields))
	for i, k := range FitFields {
		fields[k] = vals[i]
	}
	sf := map[string]string{"method": f.Method, "quality": string(f.Quality)}
	if f.QualityReason != "" {
		sf["quality_reason"] = f.QualityReason
	}
	return Point{Measurement: measurement, Tags: tags, Fields: fields, StringFields: sf, TimeNs: f.EndNs}
}

// WriteFits writes fits (see FitPoint) in batches with retries. Writing the
// same fits again overwrites them.
func (c *Client) WriteFits(ctx context.Context, measurement string, fits []model.Fit, site string) error {
	pts := make([]Point, len(fits))
	for i := range fits {
		if fits[i].Tank == "" {
			return fmt.Errorf("influx: write fits: fit %d (end %s) has no tank", i, fluxTime(fits[i].EndNs))
		}
		pts[i] = FitPoint(measurement, &fits[i], site)
	}
	return c.WritePoints(ctx, pts)
}

// WriteLevels writes one tank's level samples as measurement,tankTag=tank
// field=value at each time (non-finite values skipped), in batches with
// retries. It is how the demo plant is loaded into a server.
func (c *Client) WriteLevels(ctx context.Context, measurement, field, tankTag, tank string, timesNs []int64, values []float64) error {
	if len(timesNs) != len(values) {
		return fmt.Errorf("influx: write levels of tank %q: %d times but %d values", tank, len(timesNs), len(values))
	}
	for what, s := range map[string]string{"measurement": measurement, "field": field, "tank tag": tankTag, "tank id": tank} {
		if err := lineSafe(s); err != nil {
			return fmt.Errorf("influx: write levels of tank %q: %s %q %w", tank, what, s, err)
		}
	}
	wps := make([]*write.Point, 0, len(values))
	for i, v := range values {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			continue
		}
		wps = append(wps, write.NewPointWithMeasurement(measurement).AddTag(tankTag, tank).
			AddField(field, v).SetTime(time.Unix(0, timesNs[i])))
	}
	return c.writeBatches(ctx, fmt.Sprintf("write levels of tank %q", tank), wps)
}

// WriteLevelsInflow writes one metered tank's samples as
// measurement,tankTag=tank levelField=level,inflowField=inflow at each time,
// in batches with retries: the shape PullWithInflow reads back. A non-finite
// level or inflow is left out of its point (a point with neither is
// skipped), so a NaN inflow means "no meter reading at this time". It is how
// the demo plant loads a tank with an inflow flowmeter.
func (c *Client) WriteLevelsInflow(ctx context.Context, measurement, levelField, inflowField, tankTag, tank string,
	timesNs []int64, levels, inflows []float64) error {
	if len(timesNs) != len(levels) || len(timesNs) != len(inflows) {
		return fmt.Errorf("influx: write levels and inflows of tank %q: %d times, %d levels, %d inflows",
			tank, len(timesNs), len(levels), len(inflows))
	}
	for what, s := range map[string]string{"measurement": measurement, "level field": levelField,
		"inflow field": inflowField, "tank tag": tankTag, "tank id": tank} {
		if err := lineSafe(s); err != nil {
			return fmt.Errorf("influx: write levels and inflows of tank %q: %s %q %w", tank, what, s, err)
		}
	}
	if levelField == inflowField {
		return fmt.Errorf("influx: write levels and inflows of tank %q: level and inflow field are both %q", tank, levelField)
	}
	finite := func(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }
	wps := make([]*write.Point, 0, len(levels))
	for i, t := range timesNs {
		lv, in := levels[i], inflows[i]
		if !finite(lv) && !finite(in) {
			continue
		}
		wp := write.NewPointWithMeasurement(measurement).AddTag(tankTag, tank).SetTime(time.Unix(0, t))
		if finite(in) {
			wp.AddField(inflowField, in)
		}
		if finite(lv) {
			wp.AddField(levelField, lv)
		}
		wps = append(wps, wp)
	}
	return c.writeBatches(ctx, fmt.Sprintf("write levels and inflows of tank %q", tank), wps)
}
