package main

import (
	"fmt"
	"math/rand/v2"
	"path/filepath"
	"sort"
	"strings"
	"testing"

	"drainsight/config"
)

// A fleet of 10 000 tanks on 5 sites, one tank in ten discharging into the
// next (cascades), split over 1-7 shards: every tank in exactly one shard,
// tanks in cascade together, the shares within 10 % of even (a uniform
// hash: binomial scatter of a few per cent), and the same split whatever
// the order of the config.
func TestShardsCoverTheFleetExactly(t *testing.T) {
	cfg := &config.Config{}
	for i := range 10000 {
		tk := config.Tank{ID: fmt.Sprintf("T%05d", i), Site: fmt.Sprintf("site-%d", i%5)}
		if i%10 == 3 {
			tk.Outlet.DischargesInto = fmt.Sprintf("T%05d", i+1)
			tk.Site = fmt.Sprintf("site-%d", (i+1)%5)
		}
		cfg.Tanks = append(cfg.Tanks, tk)
	}
	shuffled := *cfg
	shuffled.Tanks = append([]config.Tank(nil), cfg.Tanks...)
	rand.New(rand.NewPCG(1, 2)).Shuffle(len(shuffled.Tanks), func(i, j int) { shuffled.Tanks[i], shuffled.Tanks[j] = shuffled.Tanks[j], shuffled.Tanks[i] })
	for n := 1; n <= 7; n++ {
		where := map[string]int{}
		for i := range n {
			part := shardSpec{i, n}.apply(cfg)
			for _, tk := range part.Tanks {
				if prev, ok := where[tk.ID]; ok {
					t.Fatalf("n %d: %s in shards %d and %d", n, tk.ID, prev, i)
				}
				where[tk.ID] = i
			}
			if want := 10000 / n; len(part.Tanks) < want*9/10 || len(part.Tanks) > want*11/10 {
				t.Errorf("n %d: shard %d holds %d tanks, want %d ± 10 %%", n, i, len(part.Tanks), want)
			}
			again := shardSpec{i, n}.apply(&shuffled)
			if len(again.Tanks) != len(part.Tanks) {
				t.Errorf("n %d shard %d: %d tanks from the shuffled config, %d from the original", n, i, len(again.Tanks), len(part.Tanks))
			}
		}
		if len(where) != 10000 {
			t.Errorf("n %d: %d of 10000 tanks in a shard", n, len(where))
		}
		for _, tk := range cfg.Tanks {
			if into := tk.Outlet.DischargesInto; into != "" && where[into] != where[tk.ID] {
				t.Errorf("n %d: %s (into %s) in shard %d, its receiver in %d", n, tk.ID, into, where[tk.ID], where[into])
			}
		}
	}
}

func TestParseShard(t *testing.T) {
	t.Setenv("DRAINSIGHT_SHARD", "")
	for s, want := range map[string]shardSpec{"": {0, 1}, "0/1": {0, 1}, "3/4": {3, 4}} {
		if got, err := parseShard(s); err != nil || got != want {
			t.Errorf("%q: %v %v, want %v", s, got, err, want)
		}
	}
	for _, s := range []string{"4/4", "-1/3", "a/b", "2", "1/0"} {
		if _, err := parseShard(s); err == nil {
			t.Errorf("%q: no error", s)
		}
	}
	t.Setenv("DRAINSIGHT_SHARD", "1/2")
	if got, err := parseShard(""); err != nil || got != (shardSpec{1, 2}) {
		t.Errorf("from the environment: %v %v", got, err)
	}
}

// The demo plant scanned as three shards, each with its own state file,
// gives between them exactly the drains of one scan of the whole plant.
func TestShardedScanMatchesWhole(t *testing.T) {
	dir := demoPlant(t, "20")
	cfg := filepath.Join(dir, "demo.yaml")
	whole, _ := drainKeys(t, filepath.Join(dir, "events.jsonl"))
	var parts []string
	for i := range 3 {
		out := t.TempDir()
		if _, stderr, err := runArgs(t, "scan", "--new-state", "--config", cfg, "--shard", fmt.Sprintf("%d/3", i), "--state", filepath.Join(out, "s.db"), "--out", out); err != nil && exitCode(err) != 1 {
			t.Fatalf("shard %d: %v\n%s", i, err, stderr)
		}
		k, _ := drainKeys(t, filepath.Join(out, "events.jsonl"))
		parts = append(parts, k...)
	}
	sort.Strings(parts)
	if strings.Join(parts, "\n") != strings.Join(whole, "\n") {
		t.Errorf("3 shards give %d drains, the whole plant %d\nonly shards: %v\nonly whole: %v", len(parts), len(whole), head(minus(parts, whole)), head(minus(whole, parts)))
	}
}
