package config_test

import (
	"fmt"

	"drainsight/config"
)

func ExampleParse() {
	doc := []byte(`
tanks:
  - id: T1
    geometry: {shape: vertical_cylinder, diameter: 1.6 m, height: 2.4 m}
    outlet: {diameter: 80 mm, elevation: 4 in}
    sensor: {kind: pressure, unit: psi}
    source: {format: csv, paths: [levels/*.csv]}
    detection: {false_alarm_interval: 5 y}
`)
	c, err := config.Parse(doc, "/srv/drainsight/plant.yaml")
	if err != nil {
		fmt.Println(err)
		return
	}
	t := c.Tanks[0]
	fmt.Printf("outlet %.3f m at %.4f m; sensor %g Pa per psi; density %g kg/m3\n",
		t.Outlet.DiameterM, t.Outlet.ElevationM, t.Sensor.UnitToSI, t.Sensor.DensityKgM3)
	fmt.Println(t.Source.Paths[0], t.Detection.FalseAlarmInterval)

	_, err = config.Parse([]byte("tanks:\n  - id: T1\n    outlet: {diameter: 80}\n"), "plant.yaml")
	fmt.Println(err)
	// Output:
	// outlet 0.080 m at 0.1016 m; sensor 6894.757 Pa per psi; density 998.2067 kg/m3
	// /srv/drainsight/levels/*.csv 43830h0m0s
	// config: 5 problems
	// plant.yaml:2: tanks[0].geometry: required
	// plant.yaml:2: tanks[0].sensor: required
	// plant.yaml:2: tanks[0].source: required
	// plant.yaml:3: tanks[0].outlet.diameter: want a length such as "80 mm": "80" has no unit (one of cm, ft, in, km, m, mm)
	// plant.yaml:3: tanks[0].outlet.elevation: required: a length above the vessel bottom, or "unknown"
}
