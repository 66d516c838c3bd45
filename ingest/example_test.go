package ingest_test

import (
	"context"
	"fmt"
	"os"
	"path/filepath"

	"drainsight/ingest"
)

// A pressure sensor in kPa at the bottom of a tank whose outlet sits 0.1 m
// above the bottom: write its readings as line protocol, read them back as
// head.
func ExampleReadSeries() {
	dir, _ := os.MkdirTemp("", "ingest-example")
	defer os.RemoveAll(dir)

	sensor := ingest.Sensor{Kind: ingest.Pressure, UnitToSI: 1000} // kPa, water at 20 °C
	heads := []float64{1.2, 1.1, 1.0}
	times := []int64{1709251200e9, 1709251260e9, 1709251320e9}
	readings := make([]float64, len(heads))
	for i, h := range heads {
		readings[i] = sensor.Reading(h, 0.1)
	}
	f, _ := os.Create(filepath.Join(dir, "day1.lp"))
	if err := ingest.WriteLineProtocol(f, "tank_level", "level", "tank", "T1", times, readings); err != nil {
		fmt.Println(err)
	}
	f.Close()

	conv := map[string]ingest.Conversion{"T1": {Sensor: sensor, OutletElevM: 0.1}}
	series, rep, err := ingest.ReadSeries(context.Background(), []string{filepath.Join(dir, "*.lp")},
		ingest.FormatAuto, ingest.ReadOptions{Measurement: "tank_level"}, conv)
	if err != nil {
		fmt.Println(err)
	}
	s := series["T1"]
	for i := range s.TimeNs {
		fmt.Printf("%d %.6f m\n", s.TimeNs[i]/1e9, s.HeadM[i])
	}
	fmt.Println(rep.Samples, "samples,", rep.Problems(), "problems")
	// Output:
	// 1709251200 1.200000 m
	// 1709251260 1.100000 m
	// 1709251320 1.000000 m
	// 3 samples, 0 problems
}
