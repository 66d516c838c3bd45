package store_test

import (
	"fmt"
	"math"
	"os"
	"path/filepath"
	"time"

	"drainsight/model"
	"drainsight/store"
)

// A scan commits each tank's results and its checkpoint together; running
// the same scan again changes nothing.
func ExampleStore_CommitTank() {
	dir, _ := os.MkdirTemp("", "store-example")
	defer os.RemoveAll(dir)
	s, err := store.Open(filepath.Join(dir, "state.db"), time.Second)
	if err != nil {
		fmt.Println(err)
		return
	}
	defer s.Close()
	c := store.TankCommit{
		Fits:          []model.Fit{{Tank: "T1", StartNs: 0, EndNs: 600e9, KM25s: 0.0021, Cd: math.NaN(), EmptyHeadM: math.NaN()}},
		DetectorState: []byte(`{}`),
		Checkpoint:    &store.Checkpoint{CommittedNs: 3600e9, ResumeNs: 3600e9},
	}
	for range 2 {
		if err := s.CommitTank("T1", c); err != nil {
			fmt.Println(err)
			return
		}
	}
	fits, _ := s.Fits("T1", math.MinInt64, math.MaxInt64)
	cp, _, _ := s.Checkpoint("T1")
	fmt.Println(len(fits), fits[0].KM25s, math.IsNaN(fits[0].Cd), cp.CommittedNs)
	// Output: 1 0.0021 true 3600000000000
}
