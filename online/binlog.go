package online

// binLog keeps the bins added since the last fold in compact form (one frame
// and the non-zero counts per bin, not the lagged row of Pixels·Lags values),
// so that Update can fold them by the block update. It holds at most limit
// bins; past that it is dropped and Update re-solves from the sufficient
// statistics instead (which carry every bin, logged or not).
type binLog struct {
	pixels, lags int
	limit        int // most bins kept

	frames  []float64 // frames in order; the first `history` precede the first bin
	nframes int
	history int
	counts  []Count
	ends    []int   // per bin, the end of its counts in counts
	halfA   []bool  // per bin, whether it belongs to split half A
	pos     []int32 // per bin, its frame's index in frames
	dropped bool    // more than limit bins came: the log is incomplete
}

// start empties the log; hist are the frames before the next one, oldest
// first (at most lags−1 are kept).
func (l *binLog) start(hist [][]float64) {
	l.nframes, l.history = 0, 0
	l.counts, l.ends, l.halfA, l.pos = l.counts[:0], l.ends[:0], l.halfA[:0], l.pos[:0]
	l.dropped = false
	if len(hist) > l.lags-1 {
		hist = hist[len(hist)-(l.lags-1):]
	}
	for _, f := range hist {
		l.addFrame(f)
	}
	l.history = len(hist)
}

// bins is the number of bins logged.
func (l *binLog) bins() int { return len(l.ends) }

// addFrame appends a frame. Storage grows by doubling up to limit+lags
// frames, so steady state does not allocate.
func (l *binLog) addFrame(f []float64) {
	if l.dropped {
		return
	}
	need := (l.nframes + 1) * l.pixels
	if need > len(l.frames) {
		n := max(need, min(2*len(l.frames), (l.limit+l.lags)*l.pixels))
		l.frames = append(l.frames[:l.nframes*l.pixels], make([]float64, n-l.nframes*l.pixels)...)
	}
	copy(l.frames[l.nframes*l.pixels:need], f)
	l.nframes++
}

// addBin records a used bin whose frame was the last one added. It reports
// false when the log overflows and has been dropped.
func (l *binLog) addBin(halfA bool, counts []Count) bool {
	if l.dropped {
		return false
	}
	if len(l.ends) >= l.limit {
		l.dropped = true
		l.nframes = 0
		l.counts, l.ends, l.halfA, l.pos = l.counts[:0], l.ends[:0], l.halfA[:0], l.pos[:0]
		return false
	}
	for _, c := range counts {
		if c.N != 0 {
			l.counts = append(l.counts, c)
		}
	}
	l.ends = append(l.ends, len(l.counts))
	l.halfA = append(l.halfA, halfA)
	l.pos = append(l.pos, int32(l.nframes-1))
	return true
}

// rowTo writes the lagged stimulus of logged bin k into x (Pixels·Lags) and
// returns its counts and half.
func (l *binLog) rowTo(x []float64, k int) (counts []Count, halfA bool) {
	p := int(l.pos[k])
	for lag := range l.lags {
		f := p - lag
		copy(x[lag*l.pixels:(lag+1)*l.pixels], l.frames[f*l.pixels:(f+1)*l.pixels])
	}
	lo := 0
	if k > 0 {
		lo = l.ends[k-1]
	}
	return l.counts[lo:l.ends[k]], l.halfA[k]
}
