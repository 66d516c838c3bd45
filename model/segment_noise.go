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
	d2      []float64
	ests    [noiseBlocks]float64
	sorted  []float64 // ests[:ne] in ascending order
	ne      int
	epos    int
	next    int // size of the block at which a provisional estimate is made
	sigma   float64
	tmp     []float64
}

func (e *noiseEstimator) init() {
	e.sigma = noiseDefaultM
	e.next = 16
	e.d2 = make([]float64, 0, 256)
}

func floorDiv(a, b int64) int64 {
	q := a / b
	if a%b != 0 && (a < 0) != (b < 0) {
		q--
	}
	return q
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
			e.tmp = append(e.tmp[:0], e.d2...)
			e.sigma = 1.4826 * median(e.tmp) / math.Sqrt(6)
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
	b := 1.4826 * median(e.d2) / math.Sqrt(6)
	if e.ne == noiseBlocks {
		// the oldest block leaves the sorted copy
		i, _ := slices.BinarySearch(e.sorted, e.ests[e.epos])
		e.sorted = slices.Delete(e.sorted, i, i+1)
	}
	i, _ := slices.BinarySearch(e.sorted, b)
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

// median returns the median of x, reordering x. NaN for an empty slice.
func median(x []float64) float64 {
	n := len(x)
	if n == 0 {
		return math.NaN()
	}
	k := n / 2
	m := selectK(x, k)
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

// selectK partially sorts x so that x[k] is the k-th smallest value and
// returns it (Hoare's quickselect, median-of-three pivot). NaNs are not
// expected.
func selectK(x []float64, k int) float64 {
	lo, hi := 0, len(x)-1
	for hi > lo {
		mid := lo + (hi-lo)/2
		if x[mid] < x[lo] {
			x[mid], x[lo] = x[lo], x[mid]
		}
		if x[hi] < x[lo] {
			x[hi], x[lo] = x[lo], x[hi]
		}
		if x[hi] < x[mid] {
			x[hi], x[mid] = x[mid], x[hi]
		}
		p := x[mid]
		i, j := lo, hi
		for i <= j {
			for x[i] < p {
				i++
			}
			for x[j] > p {
				j--
			}
			if i <= j {
				x[i], x[j] = x[j], x[i]
				i++
				j--
			}
		}
		switch {
		case k <= j:
			hi = j
		case k >= i:
			lo = i
		default:
			return x[k]
		}
	}
	return x[k]
}
