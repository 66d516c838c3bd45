package main

import (
	"fmt"
	"hash/fnv"
	"os"
	"strconv"
	"strings"

	"drainsight/config"
)

// shardUsage is the --shard flag's help.
const shardUsage = `run only shard I of N of the tanks ("I/N", 0 <= I < N; "host/N" takes I from the host name's trailing "-I", as a StatefulSet's pods are named); default $DRAINSIGHT_SHARD, else all tanks. Each shard needs its own state file`

// shardSpec is one replica's share of the fleet.
type shardSpec struct{ i, n int }

// parseShard reads "I/N" or "host/N" ("" is the whole fleet).
func parseShard(s string) (shardSpec, error) {
	if s == "" {
		s = os.Getenv("DRAINSIGHT_SHARD")
	}
	if s == "" {
		return shardSpec{0, 1}, nil
	}
	a, b, ok := strings.Cut(s, "/")
	n, err := strconv.Atoi(b)
	if !ok || err != nil || n < 1 {
		return shardSpec{}, fmt.Errorf("--shard %q: want I/N with N >= 1", s)
	}
	if a == "host" {
		h, err := os.Hostname()
		if err != nil {
			return shardSpec{}, fmt.Errorf("--shard %q: %w", s, err)
		}
		k := strings.LastIndexByte(h, '-')
		if k < 0 {
			return shardSpec{}, fmt.Errorf("--shard %q: host name %q does not end in -ORDINAL", s, h)
		}
		a = h[k+1:]
	}
	i, err := strconv.Atoi(a)
	if err != nil || i < 0 || i >= n {
		return shardSpec{}, fmt.Errorf("--shard %q: want 0 <= I < %d", s, n)
	}
	return shardSpec{i, n}, nil
}

// shardOf is the shard of a tank: a stable hash (FNV-1a 64) of the site and
// the id of the tank at the end of its cascade (the tank its outlet
// discharges into, followed to the last one), so that tanks in cascade,
// which are read and fitted together, share a shard. The same fleet always
// splits the same way, whatever the order of the config. byID indexes the
// config's tanks.
func shardOf(byID map[string]*config.Tank, t *config.Tank, n int) int {
	root := t
	for range len(byID) { // bounded, whatever the links
		next := byID[root.Outlet.DischargesInto]
		if next == nil {
			break
		}
		root = next
	}
	h := fnv.New64a()
	h.Write([]byte(root.Site))
	h.Write([]byte{0})
	h.Write([]byte(root.ID))
	return int(h.Sum64() % uint64(n))
}

// apply returns cfg with only the shard's tanks (cfg itself for the whole
// fleet).
func (s shardSpec) apply(cfg *config.Config) *config.Config {
	if s.n <= 1 {
		return cfg
	}
	byID := make(map[string]*config.Tank, len(cfg.Tanks))
	for i := range cfg.Tanks {
		byID[cfg.Tanks[i].ID] = &cfg.Tanks[i]
	}
	c := *cfg
	c.Tanks = nil
	for i := range cfg.Tanks {
		if shardOf(byID, &cfg.Tanks[i], s.n) == s.i {
			c.Tanks = append(c.Tanks, cfg.Tanks[i])
		}
	}
	return &c
}
