package detect

import (
	"fmt"
	"math"
	"strings"
	"time"

	"drainsight/model"
)

// Sensor fault names of the sensor study.
const (
	FaultSensorDrift = "sensor_drift" // empty-tank reading moves, size in mm/day
	FaultSensorStuck = "sensor_stuck" // reading frozen, size in hours
	FaultSensorNoise = "sensor_noise" // noise multiplied, size a factor
)

// SensorStudyRow is one cell of the sensor-fault study: the share of tanks
// with a sensor_fault finding of the right subtype within the horizon, the
// median delay from the onset to it, and the share of tanks that never got
// an outlet or leak finding (restriction, excess_outflow, tank_leak) from
// the onset to the end of the horizon, which must be 100 %.
type SensorStudyRow struct {
	Fault            string
	Size             float64
	Unit             string
	Tanks            int
	DetectedPct      float64
	MedianDelayHours float64
	NotOutletPct     float64
	FalseBeforeOnset int // findings of any kind before the onset (the healthy tank's own false-alarm budget; charts restarted after each)
}

// StudySensor simulates sensor faults at the level the detector consumes,
// on the same tanks as Study (StudyOptions.Tanks per cell, Seed, Tau,
// SERel, BaselineDays; sizes fixed here):
//
//   - drift 2, 5, 10 mm/day of random sign from the onset: each complete
//     drain's empty-tank reading and each idle period's level rate carry it
//     (the idle leak constant follows from the rate); 30 days watched,
//     evaluated daily;
//   - stuck for 2, 6, 12 h: a raw series at 30 s with 1 mm continuous noise
//     (the idle noise of the simulated tanks) is fed from a day before the
//     onset, frozen at its value at the onset, then healthy again; evaluated
//     every 15 min until a day after the end;
//   - noise ×2, ×3, ×5 from the onset: idle noise and fit noise multiplied,
//     the fit's K error growing by the same factor; 30 days, daily.
//
// Deterministic for a given Seed.
func StudySensor(opt StudyOptions) []SensorStudyRow {
	opt = opt.withDefaults()
	var rows []SensorStudyRow
	cells := []struct {
		fault string
		sizes []float64
		unit  string
	}{
		{FaultSensorDrift, []float64{2, 5, 10}, "mm/day"},
		{FaultSensorStuck, []float64{2, 6, 12}, "h"},
		{FaultSensorNoise, []float64{2, 3, 5}, "×"},
	}
	for ci, c := range cells {
		for si, size := range c.sizes {
			rows = append(rows, sensorCell(opt, c.fault, size, c.unit, uint64(5000+ci*10+si)))
		}
	}
	return rows
}

func sensorCell(opt StudyOptions, fault string, size float64, unit string, cell uint64) SensorStudyRow {
	row := SensorStudyRow{Fault: fault, Size: size, Unit: unit, Tanks: opt.Tanks}
	dopt := opt.Detector.withDefaults()
	var delays []float64
	detected, clean := 0, 0
	one := func(int64) float64 { return 1 }
	zero := func(int64) float64 { return 0 }
	wantSub := map[string]string{FaultSensorDrift: SubDrift, FaultSensorStuck: SubStuck, FaultSensorNoise: SubNoise}[fault]
	for i := 0; i < opt.Tanks; i++ {
		st := newSimTank(opt.Seed, cell, uint64(i))
		onset := studyStart + int64((opt.BaselineDays+30*st.rng.Float64())*nsPerDay)
		sign := 1.0
		if st.rng.Float64() < 0.5 {
			sign = -1
		}
		s := NewState(fmt.Sprintf("sim-%d", i))
		outlet, found := false, false
		var foundAt int64
		look := func(now int64) {
			fs := s.Evaluate(nsTime(now), dopt)
			if now < onset {
				if len(fs) > 0 {
					row.FalseBeforeOnset++
					s.restartCharts()
				}
				return
			}
			for _, f := range fs {
				if f.Kind != KindSensorFault {
					outlet = true
				} else if f.Subtype == wantSub && !found {
					found, foundAt = true, now
				}
			}
		}
		// Drains and idle periods, with the fault applied from the onset.
		horizon := onset + int64(30*nsPerDay)
		if fault == FaultSensorStuck {
			horizon = onset - int64(nsPerDay)
		}
		nextEval := studyStart + int64(nsPerDay)
		for st.tNs < horizon {
			idle, f := st.step(opt, one, zero)
			switch {
			case fault == FaultSensorDrift && f.EndNs >= onset:
				rate := sign * size * 1e-3 / (24 * 3600)
				f.EmptyHeadM += rate * float64(f.EndNs-onset) / 1e9
				idle.RateMs += rate
				const area = 2.0 // as in simTank.step
				idle.LeakKM25s = -idle.RateMs * area / math.Sqrt(idle.MeanHeadM)
			case fault == FaultSensorNoise && f.EndNs >= onset:
				idle.NoiseM *= size
				f.SigmaM *= size
				f.KM25s *= 1 + opt.SERel*math.Sqrt(size*size-1)*st.rng.NormFloat64()
				f.KSEM25s = size * opt.SERel * f.KM25s
			}
			s.AddIdle(idle, dopt)
			s.AddFit(f, dopt)
			for nextEval <= st.tNs {
				look(nextEval)
				nextEval += int64(nsPerDay)
			}
		}
		if fault == FaultSensorStuck {
			// Raw samples from a day before the onset to a day after the end.
			const dt = int64(30 * time.Second)
			const every = int64(15 * time.Minute)
			stuckEnd := onset + int64(size*3600e9)
			end := stuckEnd + int64(nsPerDay)
			t := onset - int64(nsPerDay)
			t -= t % dt
			var frozen float64
			ser := &model.Series{}
			nextLook := t + every
			for ; t <= end; t += dt {
				v := 1.5 + 0.001*st.rng.NormFloat64()
				if t >= onset && t < stuckEnd {
					if frozen == 0 {
						frozen = v
					}
					v = frozen
				}
				ser.Append(t, v)
				if t >= nextLook {
					s.AddSeries(ser, dopt)
					ser = &model.Series{}
					look(t)
					nextLook += every
				}
			}
		}
		if found {
			detected++
			delays = append(delays, float64(foundAt-onset)/3600e9)
		}
		if !outlet {
			clean++
		}
	}
	row.DetectedPct = 100 * float64(detected) / float64(opt.Tanks)
	row.MedianDelayHours = median(delays)
	row.NotOutletPct = 100 * float64(clean) / float64(opt.Tanks)
	return row
}

// FormatSensorStudyTable renders the sensor-fault study as a markdown table.
func FormatSensorStudyTable(rows []SensorStudyRow) string {
	var b strings.Builder
	b.WriteString("| sensor fault | size | tanks | detected % | median delay (h) | not reported as an outlet fault % | false before onset |\n")
	b.WriteString("|---|---|---|---|---|---|---|\n")
	for _, r := range rows {
		fmt.Fprintf(&b, "| %s | %g %s | %d | %.1f | %s | %.1f | %d |\n", r.Fault, r.Size, r.Unit, r.Tanks, r.DetectedPct,
			fmtNum(r.MedianDelayHours), r.NotOutletPct, r.FalseBeforeOnset)
	}
	return b.String()
}
