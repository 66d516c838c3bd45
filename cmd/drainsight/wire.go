package main

import (
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"time"

	"drainsight/config"
	"drainsight/detect"
	"drainsight/ingest"
	"drainsight/model"
	"drainsight/scan"
	"drainsight/store"
)

// plan is one tank's configuration copied onto the options of each part:
// the reading conversion, and what the pass needs (scan.Plan; Lookback is
// the site's influx.overlap, 0 for file sources).
type plan struct {
	cfg  config.Tank
	conv ingest.Conversion
	scan.Plan
}

// buildPlans turns the loaded config into one plan per tank. Config
// validation has already checked every field; the errors here name the tank
// for the few cross-field checks the physics makes.
func buildPlans(cfg *config.Config) ([]*plan, error) {
	plans := make([]*plan, 0, len(cfg.Tanks))
	for _, ct := range cfg.Tanks {
		p, err := buildPlan(ct)
		if err != nil {
			return nil, fmt.Errorf("%s: tank %s: %w", cfg.File, ct.ID, err)
		}
		if s := cfg.Site(ct.Site); s != nil && s.Influx != nil {
			p.Lookback = s.Influx.Overlap
			if ct.Source.Format == "influx" {
				// A scan reads up to now minus the settle delay: the feed's
				// age counts from there, or every scan would see a gap.
				p.Detect.ReadLag = s.Influx.SettleDelay
			}
		}
		plans = append(plans, p)
	}
	return plans, nil
}

func buildPlan(ct config.Tank) (*plan, error) {
	shape, err := buildShape(ct.Geometry)
	if err != nil {
		return nil, err
	}
	t := model.Tank{
		ID:          ct.ID,
		Shape:       shape,
		OutletElevM: ct.Outlet.ElevationM,
		OutletDiamM: ct.Outlet.DiameterM,
		DesignCd:    ct.Outlet.DesignCd,
		DatumKnown:  ct.Outlet.ElevationKnown,
		SensorLagS:  ct.Sensor.Damping.Seconds(),
	}
	if err := t.Validate(); err != nil {
		return nil, err
	}
	s, err := buildSensor(ct.Sensor)
	if err != nil {
		return nil, err
	}
	conv := rangeConversion(s, ct.Outlet.ElevationM, t.Shape.HeightM())
	if ct.Sensor.Inflow != nil {
		conv.InflowToSI = ct.Sensor.Inflow.ToSI
	}
	d := ct.Detection
	return &plan{cfg: ct, conv: conv, Plan: scan.Plan{
		ID:     ct.ID,
		Tank:   t,
		Linked: ct.Outlet.DischargesInto != "",
		// An InfluxDB tank's fits go back to its site's server through
		// the outbox (influxscan.go).
		WriteBack: writeBackSink(&ct),
		// Every commit's fits reach the next events.jsonl written.
		EventsSink: scan.SinkEvents,
		Segment: model.SegmentOptions{
			MinDropM:    d.MinDropM,
			MinDuration: d.MinDrainDuration,
			Transient:   d.Transient,
			Settle:      d.Settle,
			GapLimit:    d.GapLimit,
		},
		Detect: detect.Options{
			BaselineDrains:      d.BaselineDrains,
			DesignKM25s:         d.DesignKM25s,
			FalseAlarmYears:     d.FalseAlarmInterval.Hours() / (24 * 365.25),
			CUSUMK:              d.CusumK,
			EWMALambda:          d.EWMALambda,
			MaintenanceFraction: d.MaintenanceFraction,
			GapLimit:            max(d.GapLimit, 15*time.Minute),
			SilentLimit:         d.FeedSilentLimit,
		},
	}}, nil
}

// buildSensor turns a sensor's settings into its conversion to level.
func buildSensor(cs config.Sensor) (ingest.Sensor, error) {
	s := ingest.Sensor{
		Kind:        ingest.Depth,
		UnitToSI:    cs.UnitToSI,
		ZeroOffset:  cs.ZeroOffset,
		DensityKgM3: cs.DensityKgM3,
		SpanM:       cs.SpanM,
	}
	if cs.Kind == config.Pressure {
		s.Kind = ingest.Pressure
	}
	if c := cs.Calibration; c != nil { // a raw transmitter signal (mA, V, counts)
		var err error
		if len(c.Points) == 0 {
			s.Calibration, err = ingest.NewLinearCalibration(c.GainSI, c.OffsetSI)
		} else {
			s.Calibration, err = ingest.NewTableCalibration(c.Table())
		}
		if err != nil {
			return s, fmt.Errorf("sensor.calibration: %w", err)
		}
	}
	return s, s.Validate()
}

// rangeConversion is the conversion of a vessel's readings to head above
// an outlet outletElevM above its bottom, refusing readings beyond the
// vessel (0 to heightM above its bottom) by more than the range margin
// (a wrong unit or span, a transmitter fault, a corrupt value).
func rangeConversion(s ingest.Sensor, outletElevM, heightM float64) ingest.Conversion {
	margin := max(rangeMarginM, rangeMarginShare*heightM)
	return ingest.Conversion{Sensor: s, OutletElevM: outletElevM, MinHeadM: -outletElevM - margin, MaxHeadM: heightM - outletElevM + margin}
}

// buildLevels wires the config's levels (basins read only for the head
// across the outlets that discharge into them): a plan each, with its
// conversion to level above its bottom and nothing to analyse.
func buildLevels(cfg *config.Config) ([]*plan, error) {
	var out []*plan
	for _, l := range cfg.Levels {
		s, err := buildSensor(l.Sensor)
		if err != nil {
			return nil, fmt.Errorf("%s: level %s: %w", cfg.File, l.ID, err)
		}
		out = append(out, &plan{
			cfg:  config.Tank{ID: l.ID, Site: l.Site, Description: l.Description, BaseElevationM: l.BaseElevationM, Sensor: l.Sensor, Source: l.Source},
			conv: rangeConversion(s, 0, l.HeightM), Plan: scan.Plan{ID: l.ID},
		})
	}
	return out, nil
}

// receivers indexes what outlets can discharge into, tanks and levels, by id.
func receivers(plans, levels []*plan) map[string]*plan {
	m := make(map[string]*plan, len(plans)+len(levels))
	for _, p := range plans {
		m[p.cfg.ID] = p
	}
	for _, p := range levels {
		m[p.cfg.ID] = p
	}
	return m
}

func buildShape(g config.Geometry) (model.Shape, error) {
	switch g.Shape {
	case config.VerticalCylinder:
		return model.VerticalCylinder{DiameterM: g.DiameterM, InternalHeightM: g.HeightM}, nil
	case config.Rectangular:
		return model.Rectangular{LengthM: g.LengthM, WidthM: g.WidthM, InternalHeightM: g.HeightM}, nil
	case config.HorizontalCylinder:
		return model.HorizontalCylinder{DiameterM: g.DiameterM, LengthM: g.LengthM}, nil
	case config.Sphere:
		return model.Sphere{DiameterM: g.DiameterM}, nil
	case config.ConeBottomCylinder:
		return model.ConeBottomCylinder{DiameterM: g.DiameterM, CylinderHeightM: g.HeightM - g.ConeHeightM, ConeHeightM: g.ConeHeightM}, nil
	case config.StrappingTable:
		lv := make([]float64, len(g.Strapping))
		vol := make([]float64, len(g.Strapping))
		for i, p := range g.Strapping {
			lv[i], vol[i] = p.LevelM, p.VolumeM3
		}
		return model.NewStrappingTable(lv, vol)
	}
	return nil, fmt.Errorf("unknown shape %q", g.Shape)
}

// openStore opens the state file with a lock timeout, creating its directory.
// A missing file is created only when create is set (scan, backfill and
// serve with --new-state or outputs.new_state: a first run); otherwise it
// is an error, so that a state volume that did not mount never passes for
// a plant without history.
func openStore(path string, create bool) (*store.Store, error) {
	if !create {
		if _, err := os.Stat(path); errors.Is(err, fs.ErrNotExist) {
			return nil, missingState(path)
		}
	}
	if err := os.MkdirAll(filepath.Dir(path), 0o755); err != nil {
		return nil, err
	}
	return store.Open(path, 5*time.Second)
}

// missingState is the error for a state file that does not exist.
func missingState(path string) error {
	return fmt.Errorf("state file %s does not exist: for a first run pass --new-state (or set outputs.new_state: true); "+
		"otherwise check that its volume is mounted, or restore a backup (drainsight state --help)", path)
}

// writeBackSink is the outbox sink of a tank's write-back: its site's
// InfluxDB, for tanks read from one ("" otherwise).
func writeBackSink(ct *config.Tank) string {
	if ct.Source.Format != "influx" {
		return ""
	}
	return "influx:" + ct.Site
}

// A reading is out of range when it lies beyond the tank's bottom or top by
// more than rangeMarginShare of its height, and at least rangeMarginM:
// room for a zero offset, a drifting transmitter (which the sensor checks
// must see) and a level in the overflow, not for a wrong unit. The margins
// are this project's choice, not a published figure: a drifting
// transmitter is reported as a sensor fault once its empty reading moves
// by detect.Options.DriftM (1 cm by default), long before its readings
// leave the margin.
const (
	rangeMarginM     = 0.1
	rangeMarginShare = 0.1
)
