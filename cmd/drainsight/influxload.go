package main

import (
	"context"
	"fmt"
	"time"

	"drainsight/ingest/influx"
)

// demoLoader writes the demo plant's readings into an InfluxDB.
type demoLoader struct{ c *influx.Client }

func newDemoLoader(url, bucket, org, token string) (*demoLoader, error) {
	c, err := influx.New(influx.Conn{URL: url, Bucket: bucket, Org: org, Token: token}, influx.Options{})
	if err != nil {
		return nil, fmt.Errorf("demo: %w", err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	if err := c.Check(ctx); err != nil {
		c.Close()
		return nil, fmt.Errorf("demo: %w", err)
	}
	return &demoLoader{c: c}, nil
}

// load writes one tank's readings, and its metered inflow in L/s (the unit
// the demo config gives the meter) when it has one.
func (l *demoLoader) load(ctx context.Context, tank string, timesNs []int64, readings, inflowM3s []float64) error {
	if inflowM3s == nil {
		return l.c.WriteLevels(ctx, "tank_level", "level", "tank", tank, timesNs, readings)
	}
	ls := make([]float64, len(inflowM3s))
	for i, q := range inflowM3s {
		ls[i] = q * 1000
	}
	return l.c.WriteLevelsInflow(ctx, "tank_level", "level", "inflow", "tank", tank, timesNs, readings, ls)
}

func (l *demoLoader) Close() { l.c.Close() }
