package main

import (
	"testing"
	"time"

	"drainsight/config"
	"drainsight/detect"
	"drainsight/model"
)

// An InfluxDB tank is read up to now minus the site's settle delay, so its
// feed's age counts from there: with a 30 min settle delay (longer than the
// 15 min gap limit) a feed sampled every 10 s is ok at every scan, not in a
// gap that would withhold all its findings. A file tank has no read lag.
func TestInfluxFeedAgeCountsFromTheSettleDelay(t *testing.T) {
	cfg, err := config.Parse([]byte(`
sites:
  - id: s1
    influx: {url: http://127.0.0.1:8086, bucket: db/autogen, settle_delay: 30 min}
tanks:
  - id: IX
    site: s1
    geometry: {shape: vertical_cylinder, diameter: 1.6 m, height: 2.4 m}
    outlet: {diameter: 80 mm, elevation: 0.1 m}
    sensor: {kind: depth, unit: m}
    source: {format: influx}
  - id: FILE
    site: s1
    geometry: {shape: vertical_cylinder, diameter: 1.6 m, height: 2.4 m}
    outlet: {diameter: 80 mm, elevation: 0.1 m}
    sensor: {kind: depth, unit: m}
    source: {format: csv, paths: [x.csv]}
`), "feed.yaml")
	if err != nil {
		t.Fatal(err)
	}
	plans, err := buildPlans(cfg)
	if err != nil {
		t.Fatal(err)
	}
	lag := map[string]time.Duration{}
	for _, p := range plans {
		lag[p.cfg.ID] = p.detOpt.ReadLag
	}
	if lag["IX"] != 30*time.Minute || lag["FILE"] != 0 {
		t.Fatalf("read lag %v, want IX 30 min (the settle delay) and FILE 0", lag)
	}
	now := time.Date(2026, 3, 1, 12, 0, 0, 0, time.UTC)
	det := detect.NewState("IX")
	ser := &model.Series{}
	for ts := now.Add(-6 * time.Hour); ts.Before(now.Add(-30 * time.Minute)); ts = ts.Add(10 * time.Second) {
		ser.Append(ts.UnixNano(), 1+1e-4*float64(ts.Unix()%7))
	}
	det.AddSeries(ser, plans[0].detOpt)
	if fs := det.Feed(now, plans[0].detOpt); fs.State != detect.FeedOK {
		t.Errorf("feed read to now-30 min, with the read lag: %s, want ok", fs.State)
	}
	if fs := det.Feed(now, plans[1].detOpt); fs.State != detect.FeedGap {
		t.Errorf("the same feed without a read lag: %s, want gap (the test must be able to tell)", fs.State)
	}
}
