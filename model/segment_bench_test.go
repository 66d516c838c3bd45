package model

import (
	"math/rand/v2"
	"testing"
)

// BenchmarkSegmenter pushes a 1-second series (six days of drains, fills and
// idle periods, 2 mm noise) in day windows, as the database path does.
func BenchmarkSegmenter(b *testing.B) {
	for _, dt := range []float64{1, 10} {
		syn := multiDay(10)
		s := syn.sample(dt, 0.002, rand.New(rand.NewPCG(1, 2)))
		tank := synthTank()
		day := int(86400 / dt)
		name := "1s"
		if dt == 10 {
			name = "10s"
		}
		b.Run(name, func(b *testing.B) {
			for b.Loop() {
				sg := NewSegmenter(tank, SegmentOptions{})
				for at := 0; at < s.Len(); at += day {
					e := min(at+day, s.Len())
					sg.Push(s.TimeNs[at:e], s.HeadM[at:e], nil)
					sg.Take()
				}
				sg.Flush()
			}
			b.ReportMetric(float64(s.Len())*float64(b.N)/b.Elapsed().Seconds(), "samples/s")
		})
	}
}
