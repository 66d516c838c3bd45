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
	d2      []uint64 // bit patterns of |d2| in the current block (see medianBits)
	ests    [noiseBlocks]float64
	sorted  []float64 // ests[:ne] in ascending order
	ne      int
	epos    int
	next    int // size of the block at which a provisional estimate is made
	sigma   float64
	sa, sb  [noiseBlockCap]uint64 // scratch of medianBits
	// the upper middle value of the last medianBits, its first pivot
	prevMed  uint64
	havePrev bool
}

func (e *noiseEstimator) init() {
	e.sigma = noiseDefaultM
	e.next = 16
	e.d2 = make([]uint64, 0, noiseBlockCap)
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
		e.d2 = append(e.d2, math.Float64bits(ad2))
		if e.ne == 0 && len(e.d2) == e.next {
			e.next *= 2
			e.sigma = 1.4826 * e.medianBits(e.d2) / math.Sqrt(6)
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
	b := 1.4826 * e.medianBits(e.d2) / math.Sqrt(6)
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

// medianBits returns the median of the non-negative values whose
// math.Float64bits patterns are in x (not empty, at most noiseBlockCap),
// leaving x as it is. For x ≥ +0, NaN excluded, the bit patterns order as
// the values do, so the result is the value median gives on the floats:
// the middle order statistic, or the mean of the two middle ones.
//
// Each round splits the candidates around a pivot p (first the last call's
// median, then the median of three candidates) into the values < p,
// written forward from the front of a scratch buffer, and the values > p,
// written backward from its end, in one pass without data-dependent
// branches: every value is stored at both write positions and only the
// position on its side advances, so no store is read back within the
// pass. The values == p are only counted; from the second round on there
// is at least one, so every round after the first shrinks the range. The
// two middle ranks k-1 and k are followed together; when they part, the
// one outside the run of p is the largest (smallest) of its side. Runs of
// equal values, common with quantised readings, end the search early.
func (e *noiseEstimator) medianBits(x []uint64) float64 {
	n := len(x)
	k := n / 2
	klo := k
	if n&1 == 0 {
		klo = k - 1
	}
	src := x
	bufs := [2][]uint64{e.sa[:], e.sb[:]}
	var vlo, vhi uint64
	for r := 0; ; r++ {
		m := len(src)
		if m == 1 {
			vlo, vhi = src[0], src[0]
			break
		}
		a, b, c := src[0], src[m/2], src[m-1]
		p := max(min(a, b), min(max(a, b), c))
		if r == 0 && e.havePrev {
			// the last block's median: with steady noise the middle ranks
			// are near it, and with quantised readings often equal to it
			p = e.prevMed
		}
		dst := bufs[r&1][:m]
		lt, gt := 0, m-1
		for _, v := range src {
			dst[lt] = v
			dst[gt] = v
			lt += b2i(v < p)
			gt -= b2i(v > p)
		}
		eq := gt + 1 // values < p are dst[:lt], values > p dst[eq:]
		switch {
		case k < lt: // both ranks among the smaller values
			src = dst[:lt]
			continue
		case klo >= eq: // both among the larger
			src = dst[eq:]
			klo, k = klo-eq, k-eq
			continue
		}
		vlo, vhi = p, p
		if klo < lt {
			vlo = slices.Max(dst[:lt])
		}
		if k >= eq {
			vhi = slices.Min(dst[eq:])
		}
		break
	}
	e.prevMed, e.havePrev = vhi, true
	if n&1 == 1 {
		return math.Float64frombits(vhi)
	}
	return 0.5 * (math.Float64frombits(vlo) + math.Float64frombits(vhi))
}

func b2i(b bool) int {
	if b {
		return 1
	}
	return 0
}
