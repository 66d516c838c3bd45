package influx

import (
	"context"
	"fmt"
	"math"
	"slices"
	"testing"
	"time"
)

// inflowSample is one PullWithInflow row; inflow as bits so NaN compares.
type inflowSample struct {
	t      int64
	level  float64
	inflow uint64
}

func pullAllInflow(t *testing.T, src *Source, tanks []string, start, stop int64, width time.Duration) map[string][]inflowSample {
	t.Helper()
	got := map[string][]inflowSample{}
	for _, w := range Windows(start, stop, width) {
		_, err := src.PullWithInflow(context.Background(), tanks, w[0], w[1], func(tank string, tNs int64, level, inflow float64) {
			if math.IsNaN(inflow) {
				inflow = math.NaN()
			}
			got[tank] = append(got[tank], inflowSample{tNs, level, math.Float64bits(inflow)})
		})
		if err != nil {
			t.Fatalf("pull [%s, %s): %v", fluxTime(w[0]), fluxTime(w[1]), err)
		}
	}
	return got
}

// TestIntegrationPullWithInflow writes a metered tank (inflow missing at
// every fourth sample, plus inflow readings between level samples) and an
// unmetered one with WriteLevelsInflow, and reads them back exactly over
// windows whose edges fall on samples.
func TestIntegrationPullWithInflow(t *testing.T) {
	c := integrationClient(t, integrationConn(t), Options{})
	ctx := context.Background()
	meas := testMeasurement(t)
	want := map[string][]inflowSample{}
	var ts []int64
	var levels, inflows []float64
	for i := range 360 { // 1 h at 10 s
		tt := itBase + int64(i)*10e9
		lv, in := 2-float64(i)*0.001, 0.0125*float64(i%9)
		if i%4 == 0 {
			in = math.NaN()
		}
		ts, levels, inflows = append(ts, tt), append(levels, lv), append(inflows, in)
		want["M1"] = append(want["M1"], inflowSample{tt, lv, math.Float64bits(in)})
		// An inflow reading with no level beside it: never delivered.
		ts, levels, inflows = append(ts, tt+5e9), append(levels, math.NaN()), append(inflows, 0.5)
	}
	if err := c.WriteLevelsInflow(ctx, meas, "level", "inflow", "tank", "M1", ts, levels, inflows); err != nil {
		t.Fatal(err)
	}
	var uts []int64
	var ulv, uin []float64
	for i := range 120 { // unmetered, 30 s
		tt := itBase + int64(i)*30e9
		uts, ulv, uin = append(uts, tt), append(ulv, 1+float64(i)*0.01), append(uin, math.NaN())
		want["U2"] = append(want["U2"], inflowSample{tt, ulv[i], math.Float64bits(math.NaN())})
	}
	if err := c.WriteLevelsInflow(ctx, meas, "level", "inflow", "tank", "U2", uts, ulv, uin); err != nil {
		t.Fatal(err)
	}
	src, err := c.Source(SeriesSpec{Measurement: meas, Field: "level", InflowField: "inflow"})
	if err != nil {
		t.Fatal(err)
	}
	stop := itBase + 3600e9
	for _, width := range []time.Duration{7 * time.Minute, time.Hour, 10 * time.Second} {
		got := pullAllInflow(t, src, []string{"M1", "U2", "X9"}, itBase, stop, width)
		for tank, w := range want {
			if !slices.Equal(got[tank], w) {
				t.Errorf("width %v, tank %s: got %d rows, want %d (first diff at %d)", width, tank, len(got[tank]), len(w), firstDiffInflow(got[tank], w))
			}
		}
		if len(got) != len(want) {
			t.Errorf("width %v: got tanks %v, want M1 and U2", width, slices.Collect(mapsKeys(got)))
		}
	}
	// Pull on the same source still reads the level alone.
	lv := pullAll(t, src, []string{"M1"}, itBase, stop, time.Hour)
	if len(lv["M1"]) != 360 || lv["M1"][7] != (sample{want["M1"][7].t, want["M1"][7].level}) {
		t.Errorf("Pull: got %d samples, want 360 levels", len(lv["M1"]))
	}
	// The stop is exclusive: [0, 10 s) holds one row.
	n, err := src.PullWithInflow(ctx, []string{"M1"}, itBase, itBase+10e9, func(string, int64, float64, float64) {})
	if err != nil || n != 1 {
		t.Errorf("pull [0, 10 s): got %d rows (%v), want 1", n, err)
	}
}

// TestIntegrationPullWithInflowTypesAndNames: an integer inflow beside a
// float level, and field names and a tank id that need escaping, come back
// exactly.
func TestIntegrationPullWithInflowTypesAndNames(t *testing.T) {
	c := integrationClient(t, integrationConn(t), Options{})
	ctx := context.Background()
	meas := testMeasurement(t)
	if err := c.write.WriteRecord(ctx,
		fmt.Sprintf("%s,tank=I1 level=1.5,inflow=3i %d", meas, itBase),
		fmt.Sprintf("%s,tank=I1 level=2i %d", meas+"_int_level", itBase+1e9),
		fmt.Sprintf("%s,tank=I1 level=1.25 %d", meas, itBase+1e9)); err != nil {
		t.Fatal(err)
	}
	src, err := c.Source(SeriesSpec{Measurement: meas, Field: "level", InflowField: "inflow"})
	if err != nil {
		t.Fatal(err)
	}
	got := pullAllInflow(t, src, nil, itBase, itBase+60e9, time.Hour)
	want := []inflowSample{{itBase, 1.5, math.Float64bits(3)}, {itBase + 1e9, 1.25, math.Float64bits(math.NaN())}}
	if !slices.Equal(got["I1"], want) {
		t.Errorf("integer inflow: got %v, want %v", got["I1"], want)
	}
	srcInt, err := c.Source(SeriesSpec{Measurement: meas + "_int_level", Field: "level", InflowField: "inflow"})
	if err != nil {
		t.Fatal(err)
	}
	if got := pullAllInflow(t, srcInt, nil, itBase, itBase+60e9, time.Hour); !slices.Equal(got["I1"], []inflowSample{{itBase + 1e9, 2, math.Float64bits(math.NaN())}}) {
		t.Errorf("integer level without inflow: got %v", got)
	}

	// Hostile names: a Flux keyword as the level field, quotes, ${ and
	// spaces in the inflow field and the tank id.
	hm, lf, inf, tag, tank := meas+`_h "x" ${m}`, "and", `in "flow" ${q} m3/s`, "tank id", `q"uote ${t}`
	if err := c.WriteLevelsInflow(ctx, hm, lf, inf, tag, tank, []int64{itBase, itBase + 1e9}, []float64{0.75, 0.5}, []float64{0.125, math.NaN()}); err != nil {
		t.Fatal(err)
	}
	hs, err := c.Source(SeriesSpec{Measurement: hm, Field: lf, InflowField: inf, TankTag: tag})
	if err != nil {
		t.Fatal(err)
	}
	got = pullAllInflow(t, hs, []string{tank, "other"}, itBase, itBase+60e9, time.Hour)
	want = []inflowSample{{itBase, 0.75, math.Float64bits(0.125)}, {itBase + 1e9, 0.5, math.Float64bits(math.NaN())}}
	if !slices.Equal(got[tank], want) || len(got) != 1 {
		t.Errorf("hostile names: got %v, want %v", got, want)
	}
	// The hostile spec of the golden test is valid Flux on the server.
	hg, err := c.Source(SeriesSpec{Measurement: `lvl "x" ${m}`, Field: `and`, InflowField: `in "flow" ${q} m3/s`,
		TankTag: "tank id", Tags: map[string]string{"si/te": "${site}"}})
	if err != nil {
		t.Fatal(err)
	}
	if n, err := hg.PullWithInflow(ctx, hostileIDs, itBase, itBase+3600e9, func(string, int64, float64, float64) {}); err != nil || n != 0 {
		t.Errorf("pull with the hostile golden spec: got %d rows, %v; want 0, nil", n, err)
	}
}

func firstDiffInflow(a, b []inflowSample) int {
	for i := range min(len(a), len(b)) {
		if a[i] != b[i] {
			return i
		}
	}
	return min(len(a), len(b))
}
