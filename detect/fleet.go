package detect

import (
	"math"
	"slices"
	"time"
)

// FleetRank is one tank in the fleet view.
//
// PValue is the tank's outlet evidence: the smallest of the CUSUM and EWMA
// tail p-values (the chance that a healthy tank shows a chart value this
// large within the drains monitored), Bonferroni-doubled for taking the
// smaller of two, and the p-values of any active findings; QValue is the
// Benjamini-Hochberg adjusted p-value across the fleet and Watch is
// QValue <= alpha. Findings are the tank's active findings.
type FleetRank struct {
	Tank     string    `json:"tank"`
	PValue   float64   `json:"p_value"`
	QValue   float64   `json:"q_value"`
	Watch    bool      `json:"watch"`
	Findings []Finding `json:"findings,omitempty"`
}

// RankFleet evaluates every tank at now, ranks them by evidence (smallest
// p-value first, ties by tank name) and marks the watch list by
// Benjamini-Hochberg at false discovery rate alpha (default 0.05 when
// alpha <= 0 or >= 1).
func RankFleet(states []*State, now time.Time, opt Options, alpha float64) []FleetRank {
	if alpha <= 0 || alpha >= 1 {
		alpha = 0.05
	}
	opt = opt.withDefaults()
	ranks := make([]FleetRank, len(states))
	p := make([]float64, len(states))
	for i, s := range states {
		ranks[i] = FleetRank{Tank: s.Tank, Findings: s.Evaluate(now, opt)}
		p[i] = s.evidencePValue(opt)
		for _, f := range ranks[i].Findings {
			if !math.IsNaN(f.PValue) {
				p[i] = math.Min(p[i], f.PValue)
			}
		}
		ranks[i].PValue = p[i]
	}
	q, rej := BenjaminiHochberg(p, alpha)
	for i := range ranks {
		ranks[i].QValue, ranks[i].Watch = q[i], rej[i]
	}
	slices.SortStableFunc(ranks, func(a, b FleetRank) int {
		switch {
		case a.PValue < b.PValue:
			return -1
		case a.PValue > b.PValue:
			return 1
		}
		if a.Tank < b.Tank {
			return -1
		}
		if a.Tank > b.Tank {
			return 1
		}
		return 0
	})
	return ranks
}

// evidencePValue is the outlet-chart p-value of the tank (1 before
// monitoring starts).
func (s *State) evidencePValue(opt Options) float64 {
	if !s.Ref.Set || s.Monitored == 0 {
		return 1
	}
	c := math.Max(s.CUSUM.Hi, s.CUSUM.Lo)
	pc := cusumTailPValue(opt.CUSUMK, c, s.Monitored)
	pe := ewmaTailPValue(opt.EWMALambda, math.Abs(s.EWMA.Value), s.Monitored)
	return math.Min(1, 2*math.Min(pc, pe))
}
