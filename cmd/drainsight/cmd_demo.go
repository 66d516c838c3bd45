package main

import (
	"bufio"
	"context"
	"fmt"
	"io"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"text/tabwriter"
	"time"

	"drainsight/config"
	"drainsight/ingest"
	"drainsight/model"
	"drainsight/model/sim"
)

const demoAbout = `Runs the whole job on the embedded demo plant: an invented water works with
eight tanks of several shapes (upright, cone-bottomed and horizontal
cylinders, a sphere, a rectangular tank), depth and pressure sensors, months
of level data at 10-60 s sampling made by drainsight's own simulator, with
injected faults: gradual fouling, an abrupt blockage, an eroding valve seat
(excess outflow), a tank leak and level-sensor faults, beside healthy tanks.

The demo writes its data files (CSV and line protocol) and its config
(demo.yaml) into DIR, scans them like any plant, writes events.jsonl,
findings.jsonl, feeds.jsonl and the outlet-health report, and prints what it
found next to what was injected (the detention basin's data gap shows as its
feed's status, never as a finding). With --influx-url it first loads the
data into that InfluxDB and scans them from there.`

// demoStart is the first day of the demo plant's data.
var demoStart = time.Date(2026, 1, 5, 0, 0, 0, 0, time.UTC)

// demoSensor is how the demo plant's instruments read and where they log.
type demoSensor struct {
	kind, unit string
	density    float64 // kg/m^3 of the contents (pressure sensors)
	format     string  // csv or line_protocol
}

// demoSensors picks an instrument per tank by its position in the plant:
// a mix of units, both kinds and both file formats.
var demoSensors = []demoSensor{
	{"depth", "m", 0, "csv"},
	{"pressure", "kPa", 1030, "line_protocol"}, // sludge
	{"depth", "mm", 0, "csv"},
	{"depth", "percent", 0, "line_protocol"},
	{"pressure", "psi", 998.2067, "csv"},
	{"depth", "m", 0, "line_protocol"},
	{"depth", "cm", 0, "line_protocol"},
	{"depth", "mm", 0, "csv"},
}

func runDemo(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "demo", "demo [--out DIR] [flags]", demoAbout)
	outDir := fs.String("out", "demo-out", "directory for the demo's data, config and outputs (its state is reset)")
	days := fs.Int("days", 120, "days of level history to simulate")
	seed := fs.Uint64("seed", 1, "random seed of the simulator")
	influxURL := fs.String("influx-url", "", "load the demo into this InfluxDB and scan it from there")
	influxBucket := fs.String("influx-bucket", "drainsight/autogen", "bucket (\"db/rp\" on InfluxDB 1.8) for --influx-url")
	influxOrg := fs.String("influx-org", "", "organisation for --influx-url (InfluxDB 2.x)")
	influxTokenEnv := fs.String("influx-token-env", "DRAINSIGHT_INFLUX_TOKEN", "environment variable holding the token for --influx-url")
	verbose := fs.Bool("v", false, "debug logging")
	if err := parseFlags(e, fs, args); err != nil {
		return err
	}
	if *days < 20 {
		return &usageError{"demo: --days must be at least 20"}
	}
	log := newLogger(e.stderr, *verbose)
	start := time.Now()
	dataDir := filepath.Join(*outDir, "data")
	if err := os.MkdirAll(dataDir, 0o755); err != nil {
		return err
	}
	for _, f := range []string{"state.db", "events.jsonl", "findings.jsonl", "feeds.jsonl"} {
		if err := os.Remove(filepath.Join(*outDir, f)); err != nil && !os.IsNotExist(err) {
			return err
		}
	}
	specs := sim.DemoPlant(demoStart, *days)
	end := demoStart.Add(time.Duration(*days) * 24 * time.Hour)
	var truths []sim.Truth
	var yaml strings.Builder
	writeDemoHeader(&yaml, *influxURL, *influxBucket, *influxOrg, *influxTokenEnv)
	var loader *demoLoader
	if *influxURL != "" {
		l, err := newDemoLoader(*influxURL, *influxBucket, *influxOrg, os.Getenv(*influxTokenEnv))
		if err != nil {
			return err
		}
		defer l.Close()
		loader = l
	}
	for i, spec := range specs {
		rng := rand.New(rand.NewPCG(*seed, uint64(i)+1))
		ser, truth := sim.Simulate(spec, demoStart, end, rng)
		truths = append(truths, truth)
		ds := demoSensors[i%len(demoSensors)]
		sensor, err := demoIngestSensor(ds, spec.Tank)
		if err != nil {
			return err
		}
		readings := make([]float64, ser.Len())
		for k, h := range ser.HeadM {
			readings[k] = sensor.Reading(h, spec.Tank.OutletElevM)
		}
		file := ""
		if loader != nil {
			if err := loader.load(ctx, spec.Tank.ID, ser.TimeNs, readings, ser.InflowM3s); err != nil {
				return err
			}
		} else {
			file, err = writeDemoData(dataDir, spec.Tank.ID, ds.format, ser.TimeNs, readings, ser.InflowM3s)
			if err != nil {
				return err
			}
		}
		writeDemoTank(&yaml, spec, ds, file, loader != nil, ser.InflowM3s != nil)
	}
	fmt.Fprintf(&yaml, "\noutputs:\n  directory: .\n  state_file: state.db\n")
	cfgPath := filepath.Join(*outDir, "demo.yaml")
	if err := os.WriteFile(cfgPath, []byte(yaml.String()), 0o644); err != nil {
		return err
	}
	cfg, err := config.Load(cfgPath)
	if err != nil {
		return fmt.Errorf("demo config: %w", err)
	}
	fmt.Fprintf(e.stdout, "Demo plant: %s (invented), %d tanks, %s to %s.\n\n", sim.DemoSite, len(specs),
		demoStart.Format("2006-01-02"), end.Format("2006-01-02"))
	opt := scanOptions{now: end, newState: true} // the demo's state is reset: a first run
	if loader != nil {
		opt.sinceNs = demoStart.UnixNano()
		opt.untilNs = end.UnixNano()
	}
	res, err := scanOnce(ctx, e, cfg, *outDir, "", opt, log)
	if err != nil {
		return err
	}
	if err := writeReportFiles(cfg, "", *outDir, end, log); err != nil {
		return err
	}
	fmt.Fprintln(e.stdout, "\nInjected faults (ground truth of the simulator):")
	printTruth(e.stdout, truths)
	fmt.Fprintf(e.stdout, "\nReport: %s\nConfig used: %s\nDemo run time: %s\n",
		filepath.Join(*outDir, "report.md"), cfgPath, time.Since(start).Round(time.Millisecond))
	return errTankFailures(res.failed())
}

func demoIngestSensor(ds demoSensor, t model.Tank) (ingest.Sensor, error) {
	s := ingest.Sensor{Kind: ingest.Depth}
	switch ds.unit {
	case "m":
		s.UnitToSI = 1
	case "cm":
		s.UnitToSI = 0.01
	case "mm":
		s.UnitToSI = 0.001
	case "percent":
		s.SpanM = t.Shape.HeightM()
	case "kPa":
		s.Kind, s.UnitToSI, s.DensityKgM3 = ingest.Pressure, 1000, ds.density
	case "psi":
		s.Kind, s.UnitToSI, s.DensityKgM3 = ingest.Pressure, 6894.757, ds.density
	default:
		return s, fmt.Errorf("demo: unit %q not set up", ds.unit)
	}
	return s, s.Validate()
}

func writeDemoData(dir, tank, format string, timesNs []int64, readings, inflow []float64) (string, error) {
	ext := ".csv"
	if format == "line_protocol" {
		ext = ".lp"
	}
	path := filepath.Join(dir, strings.ToLower(tank)+ext)
	f, err := os.Create(path)
	if err != nil {
		return "", err
	}
	w := bufio.NewWriterSize(f, 1<<20)
	switch {
	case format == "csv":
		err = ingest.WriteCSV(w, tank, timesNs, readings)
	case inflow != nil:
		// Level and metered inflow (L/s) on one line per sample.
		for i, t := range timesNs {
			q := inflow[i] * 1000
			if q != q { // NaN: no meter reading yet
				q = 0
			}
			_, err = fmt.Fprintf(w, "tank_level,tank=%s level=%s,inflow=%s %d\n", tank,
				strconv.FormatFloat(readings[i], 'g', -1, 64), strconv.FormatFloat(q, 'g', -1, 64), t)
			if err != nil {
				break
			}
		}
	default:
		err = ingest.WriteLineProtocol(w, "tank_level", "level", "tank", tank, timesNs, readings)
	}
	if err == nil {
		err = w.Flush()
	}
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	return filepath.Base(path), err
}

func writeDemoHeader(b *strings.Builder, url, bucket, org, tokenEnv string) {
	fmt.Fprintf(b, "# Demo plant of drainsight: %s, an invented site.\n# Written by \"drainsight demo\"; every tank and reading is simulated.\n\n", sim.DemoSite)
	fmt.Fprintf(b, "sites:\n  - id: kestrel-vale\n    description: %s (invented demo site)\n", sim.DemoSite)
	if url != "" {
		fmt.Fprintf(b, "    influx:\n      url: %s\n      bucket: %q\n      org: %q\n      token_env: %s\n      query_window: 24 h\n      settle_delay: 0 s\n", url, bucket, org, tokenEnv)
	}
	fmt.Fprintf(b, "\ndefaults:\n  detection:\n    false_alarm_interval: 10 y\n\ntanks:\n")
}

func writeDemoTank(b *strings.Builder, spec sim.TankSpec, ds demoSensor, file string, fromInflux, metered bool) {
	t := spec.Tank
	fmt.Fprintf(b, "  - id: %s\n    description: %s\n    geometry:\n", t.ID, demoDescription(t.ID))
	switch s := t.Shape.(type) {
	case model.VerticalCylinder:
		fmt.Fprintf(b, "      shape: vertical_cylinder\n      diameter: %g m\n      height: %g m\n", s.DiameterM, s.InternalHeightM)
	case model.ConeBottomCylinder:
		fmt.Fprintf(b, "      shape: cone_bottom_cylinder\n      diameter: %g m\n      height: %g m\n      cone_height: %g m\n",
			s.DiameterM, s.CylinderHeightM+s.ConeHeightM, s.ConeHeightM)
	case model.HorizontalCylinder:
		fmt.Fprintf(b, "      shape: horizontal_cylinder\n      diameter: %g m\n      length: %g m\n", s.DiameterM, s.LengthM)
	case model.Sphere:
		fmt.Fprintf(b, "      shape: sphere\n      diameter: %g m\n", s.DiameterM)
	case model.Rectangular:
		fmt.Fprintf(b, "      shape: rectangular\n      length: %g m\n      width: %g m\n      height: %g m\n", s.LengthM, s.WidthM, s.InternalHeightM)
	}
	fmt.Fprintf(b, "    outlet:\n      diameter: %g mm\n      elevation: %g m\n", t.OutletDiamM*1000, t.OutletElevM)
	if t.DesignCd > 0 {
		fmt.Fprintf(b, "      design_cd: %g\n", t.DesignCd)
	}
	fmt.Fprintf(b, "    sensor:\n      kind: %s\n      unit: %s\n", ds.kind, ds.unit)
	if ds.unit == "percent" {
		fmt.Fprintf(b, "      span: %g m\n", t.Shape.HeightM())
	}
	if ds.density > 0 {
		fmt.Fprintf(b, "      density: %g kg/m3\n", ds.density)
	}
	if metered {
		fmt.Fprintf(b, "      inflow:\n        unit: L/s\n        field: inflow\n")
	}
	if fromInflux {
		fmt.Fprintf(b, "    source:\n      format: influx\n")
	} else {
		fmt.Fprintf(b, "    source:\n      format: %s\n      paths: [data/%s]\n", ds.format, file)
	}
}

func demoDescription(id string) string {
	switch {
	case strings.Contains(id, "BWR"):
		return "Backwash water recovery tank"
	case strings.Contains(id, "SHT"):
		return "Sludge holding tank"
	case strings.Contains(id, "CDT"):
		return "Coagulant day tank"
	case strings.Contains(id, "SMP"):
		return "Filter gallery drainage sump"
	case strings.Contains(id, "PHT"):
		return "Process hold tank"
	case strings.Contains(id, "DTB"):
		return "Stormwater detention basin"
	case strings.Contains(id, "FWT"):
		return "Filtrate tank"
	case strings.Contains(id, "RWT"):
		return "Rinse water tank"
	}
	return "Demo tank"
}

func printTruth(w io.Writer, truths []sim.Truth) {
	tw := tabwriter.NewWriter(w, 0, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "TANK\tINJECTED\tFROM\tTO\tMAGNITUDE")
	for _, tr := range truths {
		if len(tr.Faults) == 0 {
			fmt.Fprintf(tw, "%s\thealthy\t-\t-\t-\n", tr.Tank)
			continue
		}
		for _, f := range tr.Faults {
			to := "-"
			if !f.End.IsZero() {
				to = f.End.Format("2006-01-02")
			}
			fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%g\n", tr.Tank, f.Kind, f.Start.Format("2006-01-02"), to, f.Magnitude)
		}
	}
	tw.Flush()
}
