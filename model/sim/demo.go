package sim

import (
	"math"
	"time"

	"drainsight/model"
)

// DemoSite is the invented works the demo plant belongs to.
const DemoSite = "Kestrel Vale Water Works"

// outletK is Cd a sqrt(2 g) for an outlet of bore d (m).
func outletK(cd, d float64) float64 { return cd * math.Pi / 4 * d * d * model.Sqrt2g }

// DemoPlant returns the tanks of an invented water works over days days from
// from: eight tanks of varied duty, shape and sampling, with
//
//   - KV-BWR-1 backwash recovery tank: healthy (upright cylinder, 10 s);
//   - KV-SHT-2 sludge holding tank: gradual fouling to -25 % over the last
//     third (cone-bottomed cylinder, 30 s);
//   - KV-CDT-3 chemical day tank: a shell leak growing to 0.3 % of K (8 mm/h when full) over the
//     second half (horizontal cylinder, 20 s);
//   - KV-SMP-4 drainage sump: abrupt blockage, -35 % at 55 % of the period
//     (upright cylinder, 15 s);
//   - KV-PHT-5 process hold tank: level sensor drifting 4 mm/day from 40 %,
//     and stuck for 6 h at 25 % (sphere, 30 s);
//   - KV-DTB-6 detention basin: healthy, slow daily drains, a data gap of
//     8 h (upright cylinder, 60 s);
//   - KV-FWT-7 filtrate tank: healthy outlet, noisy sensor with spikes and a
//     metered feed that sometimes runs during drains (upright cylinder, 10 s);
//   - KV-RWT-8 rinse water tank: the outlet valve's seat erodes, K rising
//     to +30 % from 45 % to 75 % of the period (rectangular, 20 s).
//
// Faults start early enough to be seen with at least a week of data. To
// change a tank's shape, replace its Tank.Shape: the simulator handles any
// model.Shape.
func DemoPlant(from time.Time, days int) []TankSpec {
	at := func(frac float64) time.Time {
		return from.Add(time.Duration(frac * float64(days) * 24 * float64(time.Hour)))
	}
	end := from.Add(time.Duration(days) * 24 * time.Hour)
	cyl := func(d, h float64) model.Shape { return model.VerticalCylinder{DiameterM: d, InternalHeightM: h} }
	tank := func(id string, sh model.Shape, elev, bore, cd float64) model.Tank {
		return model.Tank{ID: id, Shape: sh, OutletElevM: elev, OutletDiamM: bore, DesignCd: cd, DatumKnown: true}
	}
	return []TankSpec{
		{
			Tank:  tank("KV-BWR-1", cyl(6, 4), 0.15, 0.15, 0.62),
			KM25s: outletK(0.61, 0.15), SampleEvery: 10 * time.Second, NoiseM: 0.002, QuantumM: 0.001,
			FillToM: 3.2, DrainsPerDay: 4, FillRateM3s: 0.03, PartialDrainShare: 0.1,
			ValveOpenTime: 8 * time.Second,
		},
		{
			Tank: tank("KV-SHT-2", model.ConeBottomCylinder{DiameterM: 4, CylinderHeightM: 3, ConeHeightM: 1.2}, 0, 0.1, 0.6),
			// the outlet sits at the cone's apex
			KM25s: outletK(0.58, 0.1), SampleEvery: 30 * time.Second, NoiseM: 0.003,
			FillToM: 3.6, DrainsPerDay: 2, FillRateM3s: 0.01, PartialDrainShare: 0.15,
			ValveOpenTime: 15 * time.Second,
			Faults:        []Fault{{Kind: Fouling, Start: at(2.0 / 3), End: end, Magnitude: 0.25}},
		},
		{
			Tank:  tank("KV-CDT-3", model.HorizontalCylinder{DiameterM: 1.6, LengthM: 3.5}, 0, 0.04, 0.62),
			KM25s: outletK(0.62, 0.04), SampleEvery: 20 * time.Second, NoiseM: 0.001, QuantumM: 0.0005,
			FillToM: 1.4, DrainsPerDay: 3, FillRateM3s: 0.004, PartialDrainShare: 0.2,
			ValveOpenTime: 5 * time.Second,
			Faults:        []Fault{{Kind: TankLeak, Start: at(0.5), End: end, Magnitude: 0.003}},
		},
		{
			Tank:  tank("KV-SMP-4", cyl(2.5, 3), 0.1, 0.1, 0.6),
			KM25s: outletK(0.6, 0.1), SampleEvery: 15 * time.Second, NoiseM: 0.004,
			FillToM: 2.4, DrainsPerDay: 6, FillRateM3s: 0.008, PartialDrainShare: 0.1,
			ValveOpenTime: 5 * time.Second,
			Faults:        []Fault{{Kind: Blockage, Start: at(0.55), Magnitude: 0.35}},
		},
		{
			Tank:  tank("KV-PHT-5", model.Sphere{DiameterM: 3.2}, 0.05, 0.08, 0.6),
			KM25s: outletK(0.6, 0.08), SampleEvery: 30 * time.Second, NoiseM: 0.0015,
			FillToM: 2.6, DrainsPerDay: 3, FillRateM3s: 0.006, PartialDrainShare: 0.1,
			ValveOpenTime: 10 * time.Second,
			Faults: []Fault{
				{Kind: SensorStuck, Start: at(0.25), End: at(0.25).Add(6 * time.Hour)},
				{Kind: SensorDrift, Start: at(0.4), Magnitude: 0.004},
			},
		},
		{
			Tank:  tank("KV-DTB-6", cyl(12, 3.5), 0.2, 0.2, 0.6),
			KM25s: outletK(0.6, 0.2), SampleEvery: 60 * time.Second, NoiseM: 0.003, QuantumM: 0.001,
			FillToM: 2.8, DrainsPerDay: 1, FillRateM3s: 0.05,
			ValveOpenTime: 20 * time.Second,
			Faults:        []Fault{{Kind: DataGap, Start: at(0.3), End: at(0.3).Add(8 * time.Hour)}},
		},
		{
			Tank:  tank("KV-FWT-7", cyl(3.5, 3), 0, 0.1, 0.62),
			KM25s: outletK(0.63, 0.1), SampleEvery: 10 * time.Second, NoiseM: 0.005,
			FillToM: 2.5, DrainsPerDay: 4, FillRateM3s: 0.012, InflowDuringDrainShare: 0.2, MeterInflow: true,
			ValveOpenTime: 6 * time.Second,
			Faults:        []Fault{{Kind: SensorSpikes, Start: from, Magnitude: 1, SizeM: 0.15}},
		},
		{
			Tank:  tank("KV-RWT-8", model.Rectangular{LengthM: 3, WidthM: 2, InternalHeightM: 2.5}, 0.05, 0.08, 0.61),
			KM25s: outletK(0.61, 0.08), SampleEvery: 20 * time.Second, NoiseM: 0.002,
			FillToM: 2.1, DrainsPerDay: 4, FillRateM3s: 0.01, PartialDrainShare: 0.15,
			ValveOpenTime: 6 * time.Second,
			Faults:        []Fault{{Kind: Erosion, Start: at(0.45), End: at(0.75), Magnitude: 0.3}},
		},
	}
}
