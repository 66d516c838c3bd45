package model

// extremes tracks the largest and the smallest filtered level over a
// sliding window of consecutive samples, with the index of each (the latest
// one among equal values, as a monotone deque that drops values <= (>=) the
// newcomer would give). It is a queue made of two stacks, so that every
// operation is O(1) amortised with few data-dependent branches: samples are
// pushed on the back, where a running maximum and minimum are kept; when the
// front runs empty the back moves to the front, which stores the maximum
// and minimum of each of its suffixes. The extreme of the window is the
// larger (smaller) of the front suffix at its head and the back's running
// value.
type extremes struct {
	// back: samples bStart, bStart+1, ... pushed since the last transfer
	bStart     int
	bt         []int64
	by         []float64
	bMax, bMin float64
	bArgMax    int
	bArgMin    int
	// front: samples fStart+fh .. fStart+len(ft)-1; fMax[k] is the largest
	// level over samples fStart+k .. the end of the front, at fArgMax[k]
	fStart     int
	fh         int
	ft         []int64
	fMax, fMin []float64
	fArgMax    []int
	fArgMin    []int
}

func (w *extremes) reset() {
	w.bt, w.by = w.bt[:0], w.by[:0]
	w.ft, w.fMax, w.fMin, w.fArgMax, w.fArgMin = w.ft[:0], w.fMax[:0], w.fMin[:0], w.fArgMax[:0], w.fArgMin[:0]
	w.fh = 0
}

// n is the number of samples in the window.
func (w *extremes) n() int { return len(w.ft) - w.fh + len(w.bt) }

// push adds sample i (time t, level y); i follows the last sample pushed.
func (w *extremes) push(i int, t int64, y float64) {
	if len(w.bt) == 0 {
		w.bStart = i
		w.bMax, w.bMin, w.bArgMax, w.bArgMin = y, y, i, i
	} else {
		if y >= w.bMax {
			w.bMax, w.bArgMax = y, i
		}
		if y <= w.bMin {
			w.bMin, w.bArgMin = y, i
		}
	}
	w.bt = append(w.bt, t)
	w.by = append(w.by, y)
}

// oldestT is the time of the oldest sample; the window must not be empty.
func (w *extremes) oldestT() int64 {
	if w.fh < len(w.ft) {
		return w.ft[w.fh]
	}
	return w.bt[0]
}

// popFront drops the oldest sample; the window must not be empty.
func (w *extremes) popFront() {
	if w.fh == len(w.ft) {
		w.transfer()
	}
	w.fh++
}

// transfer moves the back to the front, computing the suffix extremes.
func (w *extremes) transfer() {
	n := len(w.bt)
	w.fStart, w.fh = w.bStart, 0
	w.ft, w.bt = w.bt, w.ft // the back's times become the front's; bt is emptied below
	w.fMax = grow(w.fMax, n)
	w.fMin = grow(w.fMin, n)
	w.fArgMax = growInt(w.fArgMax, n)
	w.fArgMin = growInt(w.fArgMin, n)
	mx, mn := w.by[n-1], w.by[n-1]
	amx, amn := w.bStart+n-1, w.bStart+n-1
	for k := n - 1; k >= 0; k-- {
		y := w.by[k]
		// strict: among equal values the later sample stays
		if y > mx {
			mx, amx = y, w.bStart+k
		}
		if y < mn {
			mn, amn = y, w.bStart+k
		}
		w.fMax[k], w.fArgMax[k] = mx, amx
		w.fMin[k], w.fArgMin[k] = mn, amn
	}
	w.bt, w.by = w.bt[:0], w.by[:0]
}

// top is the largest level in the window and its index (the latest among
// equal ones); the window must not be empty.
func (w *extremes) top() (float64, int) {
	if w.fh == len(w.ft) || (len(w.bt) > 0 && w.bMax >= w.fMax[w.fh]) {
		return w.bMax, w.bArgMax
	}
	return w.fMax[w.fh], w.fArgMax[w.fh]
}

// bottom is the smallest level in the window and its index (the latest
// among equal ones); the window must not be empty.
func (w *extremes) bottom() (float64, int) {
	if w.fh == len(w.ft) || (len(w.bt) > 0 && w.bMin <= w.fMin[w.fh]) {
		return w.bMin, w.bArgMin
	}
	return w.fMin[w.fh], w.fArgMin[w.fh]
}

// argMax is the index of the largest level in the window.
func (w *extremes) argMax() int { _, i := w.top(); return i }

// argMin is the index of the smallest level in the window.
func (w *extremes) argMin() int { _, i := w.bottom(); return i }

func grow(x []float64, n int) []float64 {
	if cap(x) < n {
		return make([]float64, n, 2*n)
	}
	return x[:n]
}

func growInt(x []int, n int) []int {
	if cap(x) < n {
		return make([]int, n, 2*n)
	}
	return x[:n]
}
