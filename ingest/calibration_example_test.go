package ingest_test

import (
	"fmt"

	"drainsight/ingest"
)

// A 4-20 mA level transmitter spanning 0-3.2 m, mounted on a tank whose
// outlet is 0.1 m above the bottom; and a bench calibration table of a
// transmitter read in counts (invented values).
func ExampleCalibration() {
	loop, err := ingest.NewTableCalibration([]float64{4, 20}, []float64{0, 3.2})
	if err != nil {
		fmt.Println(err)
		return
	}
	s := ingest.Sensor{Kind: ingest.Depth, Calibration: loop}
	for _, mA := range []float64{4, 12, 20, 3.8} {
		fmt.Printf("%4.1f mA -> head %+.3f m\n", mA, s.HeadM(mA, 0.1))
	}

	table, err := ingest.NewTableCalibration([]float64{0, 1000, 2000, 4000}, []float64{0, 0.30, 0.75, 2.0})
	if err != nil {
		fmt.Println(err)
		return
	}
	lo, hi := table.ReadingRange()
	fmt.Printf("table %g-%g counts; 3000 counts -> %.4f m; 4200 counts -> %.4f m (extrapolated)\n",
		lo, hi, table.ValueSI(3000), table.ValueSI(4200))

	_, err = ingest.NewTableCalibration([]float64{0, 1000, 900}, []float64{0, 0.3, 0.4})
	fmt.Println(err)
	// Output:
	//  4.0 mA -> head -0.100 m
	// 12.0 mA -> head +1.500 m
	// 20.0 mA -> head +3.100 m
	//  3.8 mA -> head -0.140 m
	// table 0-4000 counts; 3000 counts -> 1.3181 m; 4200 counts -> 2.1250 m (extrapolated)
	// ingest: calibration: point 2: the readings are not strictly monotone (900 after 1000)
}
