package detect_test

import (
	"fmt"
	"math"
	"time"

	"drainsight/detect"
	"drainsight/model"
)

// The CUSUM decision interval for one false alarm per 3 × 10 years at two
// drains a day (the CUSUM's third of the default budget).
func ExampleThresholdForARL() {
	h := detect.ThresholdForARL(0.5, 3*10*730)
	fmt.Printf("h = %.2f\n", h)
	// Output: h = 8.84
}

// A tank drains twice a day with a 2 % scatter of K; after 20 days its
// outlet loses 30 % in one go.
func ExampleState_Evaluate() {
	s := detect.NewState("T-1")
	start := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)
	var opt detect.Options
	for i := range 60 {
		end := start.Add(time.Duration(i) * 12 * time.Hour)
		k := 1e-3 * math.Exp(0.02*math.Sin(float64(i)*1.7))
		if i >= 40 {
			k *= 0.7
		}
		s.AddFit(model.Fit{Tank: "T-1", StartNs: end.Add(-30 * time.Minute).UnixNano(), EndNs: end.UnixNano(),
			KM25s: k, KSEM25s: 0.005 * k, Quality: model.QualityA}, opt)
	}
	for _, f := range s.Evaluate(start.Add(30*24*time.Hour), opt) {
		fmt.Printf("%s/%s %.0f %% since %s\n", f.Kind, f.Subtype, f.MagnitudePct, f.Onset.Format("2006-01-02 15:04"))
	}
	// Output: restriction/abrupt -30 % since 2026-01-21 00:00
}
