package model

import (
	"math"
	"slices"
)

const (
	noiseBlockNs  = int64(600e9) // 10-minute blocks, aligned to Unix time
	noiseBlocks   = 48           // blocks in the running median (8 h)
	noiseBlockCap = 256          // second differences kept per block (the first ones)
)

// noiseEstimator estimates the white-noise σ of a reading from its second
// differences d2 = x[i] - 2 x[i-1] + x[i-2]: for white noise var(d2) = 6 σ²,
// and a smooth trend adds only its curvature. Per block, σ_b = 1.4826 ×
// median|d2| / sqrt(6); σ is the median of the last noiseBlocks block values,
// which ignores the minority of blocks that hold knees or gaps. Blocks are
// aligned to absolute time, so scans that start at different times agree
// once they have seen the same noiseBlocks blocks.
type noiseEstimator struct {
	start   int64 // current block [start, end)
	end     int64
	started bool
	d2      []float64 // |d2| in the current block
	ests    [noiseBlocks]float64
	sorted  []float64 // ests[:ne] in ascending order
	ne      int
	epos    int
	next    int // size of the block at which a provisional estimate is made
	sigma   float64
	buf     [noiseBlockCap]float64 // scratch of medianSplit
	prevMed float64                // first pivot for medianSplit
	tmp     []float64              // copy of d2 for a provisional estimate
}

func (e *noiseEstimator) init() {
	e.sigma = noiseDefaultM
	e.prevMed = math.NaN()
	e.next = 16
	e.d2 = make([]float64, 0, noiseBlockCap)
}

func floorDiv(a, b int64) int64 {
	q := a / b
	if a%b != 0 && (a < 0) != (b < 0) {
		q--
	}
	return q
}

// inBlock reports whether a value at time t goes to the current block
// after the provisional estimates, where add only appends it.
func (e *noiseEstimator) inBlock(t int64) bool {
	return t < e.end && t >= e.start && e.ne != 0
}

// add records |d2| at time t; it reports whether sigma changed.
func (e *noiseEstimator) add(t int64, ad2 float64) bool {
	changed := false
	if t >= e.end || t < e.start {
		if e.started {
			changed = e.finish()
		}
		e.started = true
		e.start = floorDiv(t, noiseBlockNs) * noiseBlockNs
		e.end = e.start + noiseBlockNs
		if e.end < e.start {
			e.end = math.MaxInt64
		}
	}
	if len(e.d2) < noiseBlockCap && !math.IsNaN(ad2) {
		e.d2 = append(e.d2, ad2)
		if e.ne == 0 && len(e.d2) == e.next {
			e.next *= 2
			// on a copy: medianSplit overwrites its input
			e.tmp = append(e.tmp[:0], e.d2...)
			e.sigma = 1.4826 * e.median(e.tmp) / math.Sqrt(6)
			changed = true
		}
	}
	return changed
}

func (e *noiseEstimator) finish() bool {
	defer func() { e.d2, e.next = e.d2[:0], 16 }()
	if len(e.d2) < 5 {
		return false
	}
	b := 1.4826 * e.median(e.d2) / math.Sqrt(6)
	if e.ne == noiseBlocks {
		// the oldest block leaves the sorted copy
		i := rankBelow(e.sorted, e.ests[e.epos])
		e.sorted = slices.Delete(e.sorted, i, i+1)
	}
	i := rankBelow(e.sorted, b)
	e.sorted = slices.Insert(e.sorted, i, b)
	e.ests[e.epos] = b
	e.epos = (e.epos + 1) % noiseBlocks
	if e.ne < noiseBlocks {
		e.ne++
	}
	// the median of the sorted block values, as median() would give it
	k := e.ne / 2
	e.sigma = e.sorted[k]
	if e.ne%2 == 0 {
		e.sigma = 0.5 * (e.sorted[k-1] + e.sorted[k])
	}
	return true
}

// median is the median of the block values x (see medianSplit, which
// overwrites x).
func (e *noiseEstimator) median(x []float64) float64 {
	m, up := medianSplit(x, e.buf[:], e.prevMed)
	e.prevMed = up
	return m
}

// rankBelow is the number of values in x below v: for x sorted, the first
// index at which v is or would be (the block values are never NaN). A
// count without branches beats a binary search on so few values.
func rankBelow(x []float64, v float64) int {
	n := 0
	for _, u := range x {
		n += b2i(u < v)
	}
	return n
}

// median returns the median of x, reordering x. NaN for an empty slice.
func median(x []float64) float64 {
	n := len(x)
	if n == 0 {
		return math.NaN()
	}
	k := n / 2
	m := selectKth(x, k)
	if n&1 == 1 {
		return m
	}
	// the largest of the lower half
	lo := x[0]
	for _, v := range x[1:k] {
		if v > lo {
			lo = v
		}
	}
	return 0.5 * (lo + m)
}
