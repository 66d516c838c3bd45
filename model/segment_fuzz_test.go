package model

import (
	"encoding/binary"
	"math"
	"testing"
	"time"
)

// FuzzSegmenterPush feeds arbitrary samples (any times, NaN, Inf, huge
// values) in arbitrary chunks: Push, Take, CommittedNs and Flush must never
// panic, and every emitted segment must be well formed.
func FuzzSegmenterPush(f *testing.F) {
	f.Add([]byte{1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12})
	f.Add([]byte("\x00\x01\xff\xff\x7f\xf8\x00\x00\x00\x00\x00\x00\x10\x00"))
	seed := make([]byte, 0, 11*400)
	for i := range 400 {
		h := 2.0
		if i > 100 {
			h = max(2-float64(i-100)*0.01, 0)
		}
		var rec [11]byte
		binary.LittleEndian.PutUint16(rec[0:], 10)
		binary.LittleEndian.PutUint64(rec[2:], math.Float64bits(h))
		rec[10] = byte(i % 7)
		seed = append(seed, rec[:]...)
	}
	f.Add(seed)
	f.Fuzz(func(t *testing.T, data []byte) {
		sg := NewSegmenter(synthTank(), SegmentOptions{MinIdle: time.Minute, MinDuration: 20 * time.Second, MinDropM: 0.01})
		tn := int64(0)
		var ts []int64
		var hs, qs []float64
		check := func(segs []Segment) {
			for _, g := range segs {
				if len(g.TimeNs) != len(g.HeadM) || g.RawEndNs < g.RawStartNs {
					t.Fatalf("malformed segment %+v", g)
				}
			}
		}
		for len(data) >= 11 {
			dt := int64(int16(binary.LittleEndian.Uint16(data[0:])))
			h := math.Float64frombits(binary.LittleEndian.Uint64(data[2:]))
			tn += dt * int64(time.Second)
			ts = append(ts, tn)
			hs = append(hs, h)
			qs = append(qs, float64(data[10])*1e-3)
			if data[10]%5 == 0 {
				sg.Push(ts, hs, qs)
				ts, hs, qs = ts[:0], hs[:0], qs[:0]
				check(sg.Take())
				_ = sg.CommittedNs()
			}
			data = data[11:]
		}
		sg.Push(ts, hs, qs)
		check(sg.Flush())
		_ = sg.CommittedNs()
	})
}
