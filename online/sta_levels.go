package online

import (
	"math"

	"livefield/online/internal/fastmat"
)

// The two-level route of the STA fold.
//
// When every row of a batch (its history rows and its bins' frames) takes
// one of two finite levels lo and hi, a pixel's value is lo + (hi−lo)·β with
// β ∈ {0, 1}, and a unit's cross sum over its spikes of a half is
//
//	Σ_k c_k·x(bin_k − l, p) = hi·T + lo·(C − T),
//	T = Σ_k c_k·β(bin_k − l, p),   C = Σ_k c_k,
//
// T an integer count. AddBin keeps each row's β as 16-bit values (0 or 1,
// one row after the other); the fold then adds, per unit and half, the β
// rows of its spike bins at every lag, a bin with count c listed c times
// (fastmat.AddLaggedRows: 16-bit sums, a row of 16×16 pixels in eight
// AVX-512 BW or sixteen AVX2 registers), into the unit's 16-bit T. The
// work is 16-bit additions per spike and lag, a quarter of the bytes of
// the float route's multiply-adds: at the reference workload (21 spikes of
// a unit's half per batch of 256 bins, 12 lags, 256 pixels) about 1 µs per
// unit and half (BenchmarkAddLaggedRows).
//
// T and C are integers and are kept as such from batch to batch
// (staIntSums: 16 bits per T, a quarter of the memory traffic of the float
// sums, and no floating-point pass per batch); a unit's half is drained
// before its C would pass 2¹⁶ − 1, and Flush, which every read calls,
// drains them all into the float sums: hi·T and lo·(C−T) are each rounded
// once, their sum once and the addition to the float sum once. For levels
// and counts whose products and sums are integers (±1, 0/1 and integer
// counts) every step is exact and the sums equal the float route's bit for
// bit; for other levels the two routes differ by roundings only (within a
// few units in the last place of Σ|c_k·x|, see TestSTALevelsRoute).
//
// Counts that are not integers, and a bin's count above staMaxCount, take
// the float route, as do the spikes of a unit's half with spikes in fewer
// than minBins bins and whole batches with a third level or a non-finite
// value; so does every spike on CPUs where the row sums run in Go (three
// times slower than the multiply-adds there, BenchmarkSTAFold). The levels
// are found per batch; a batch with other levels than those of the integer
// sums first drains them, so a stimulus that changes its levels (a grey
// pause before the noise) costs one drain and the float route for the
// batch that holds the change.

// staMaxCount is the largest count of a bin that the integer route takes:
// a batch of staBatchBins bins then adds at most 255·256 < 2¹⁶ to a T.
const staMaxCount = 255

// staLevels is a batch's two-level description for its fold: its levels and
// the β rows of its frames.
type staLevels struct {
	ok     bool    // every row of the batch is two-level and finite
	lo, hi float64 // the levels (those of the integer sums)
	rows   []uint16
}

// staRows are a batch's rows as AddBin copies them: whether they are still
// two-level, how many levels they showed (0, 1, 2), which, and per row its
// pixels at the second level (vals[r·P + p] = 1).
type staRows struct {
	rowsOK       bool
	levels       int
	rowLo, rowHi float64
	rows         int // rows seen
	vals         []uint16
}

// staWorker is one worker's scratch of a fold.
type staWorker struct {
	terms  []batchSpike    // spikes for the float route
	bins   [2][]batchSpike // a unit's integer counts per half, one entry per bin
	starts []int32         // the row starts of a half's spikes, count times each
}

// startRows begins the rows of a new batch.
func (b *staRows) startRows(s *STA) {
	if b.vals == nil {
		b.vals = make([]uint16, (s.lags-1+s.batchCap)*s.pixels)
	}
	b.rowsOK, b.levels, b.rows = true, 0, 0
}

// addRow looks at row r of the batch as AddBin copies it (while it is in
// cache): it keeps the batch's levels, sets the row's β, and gives up on a
// third level or a non-finite value.
func (b *staRows) addRow(r int, row []float64) {
	b.rows = r + 1
	if !b.rowsOK {
		return
	}
	out := b.vals[r*len(row) : (r+1)*len(row)]
	if b.levels < 2 {
		for _, v := range row {
			switch {
			case v-v != 0: // NaN or ±Inf
				b.rowsOK = false
				return
			case b.levels == 0:
				b.rowLo, b.levels = v, 1
			case v != b.rowLo:
				b.rowHi, b.levels = v, 2
			}
			if b.levels == 2 {
				break
			}
		}
		if b.levels < 2 {
			clear(out) // one level so far: every β is 0
			return
		}
	}
	lo, hi := b.rowLo, b.rowHi
	fits := 0 // values at lo or hi
	for p, v := range row {
		// Conditional moves, no branches: noise is unpredictable.
		var atHi, atLo uint16
		if v == hi {
			atHi = 1
		}
		if v == lo {
			atLo = 1
		}
		out[p] = atHi
		fits += int(atHi | atLo)
	}
	if fits != len(row) {
		b.rowsOK = false // a third level or a non-finite value
	}
}

// prepare ends the rows r of a batch: when they are two-level it agrees
// the levels with the integer sums (draining them if they differ), takes
// the rows' β and sets ok.
func (b *staLevels) prepare(s *STA, r *staRows) {
	b.ok = false
	if !r.rowsOK || r.levels == 0 {
		return
	}
	lo, hi := r.rowLo, r.rowLo
	if r.levels == 2 {
		hi = r.rowHi
	}
	sums := &s.intSums
	sums.agree(s, lo, hi)
	b.lo, b.hi = sums.lo, sums.hi
	b.rows = r.vals[:r.rows*s.pixels]
	if lo == b.hi && b.hi != b.lo {
		// The β mark the batch's second level, which is the sums' lo:
		// mark the sums' hi instead.
		for i, v := range b.rows {
			b.rows[i] = 1 - v
		}
	}
	b.ok = true
}

// grow sizes a worker's scratch for an STA.
func (wk *staWorker) grow(s *STA) {
	for h := range wk.bins {
		if cap(wk.bins[h]) < s.batchCap {
			wk.bins[h] = make([]batchSpike, 0, s.batchCap)
		}
	}
	if cap(wk.starts) < 2*s.batchCap {
		wk.starts = make([]int32, 0, 2*s.batchCap)
	}
}

// integerMinBins is the fewest bins with spikes of a unit's half that the
// integer route takes: minBins when set (tests), otherwise 1 where the row
// sums run in assembly and none in Go, where the multiply-adds are faster.
func (f *staFold) integerMinBins() int {
	switch {
	case f.minBins > 0:
		return f.minBins
	case fastmat.LaggedRowsInAssembly():
		return 1
	}
	return math.MaxInt
}

// addLevels adds unit u's spikes of the batch to its integer sums and
// returns terms with the spikes left for the float route appended.
func (f *staFold) addLevels(u int, spikes []int32, wk *staWorker, terms []batchSpike) []batchSpike {
	s, b := f.s, &f.levels
	P, L, D := s.pixels, s.lags, s.dim
	all := f.batch.spikes
	byHalf := [2][]batchSpike{wk.bins[0][:0], wk.bins[1][:0]}
	var total [2]int64
	for a := 0; a < len(spikes); {
		// The unit's entries of one bin (in bin order): their integer
		// counts add up.
		first := all[spikes[a]]
		var sum float64
		for ; a < len(spikes) && all[spikes[a]].bin == first.bin; a++ {
			sp := all[spikes[a]]
			if sp.n == math.Trunc(sp.n) && sp.n <= staMaxCount {
				sum += sp.n
				continue
			}
			terms = append(terms, sp)
		}
		first.n = sum
		switch {
		case sum == 0:
		case sum > staMaxCount:
			terms = append(terms, first)
		default:
			byHalf[first.half] = append(byHalf[first.half], first)
			total[first.half] += int64(sum)
		}
	}
	wk.bins = byHalf
	sums := &s.intSums
	minBins := f.integerMinBins()
	for h, bins := range byHalf {
		if len(bins) == 0 {
			continue
		}
		if len(bins) < minBins || total[h] > math.MaxUint16 {
			// Few spikes (tests), or more counts than 16-bit sums hold.
			terms = append(terms, bins...)
			continue
		}
		starts := wk.starts[:0]
		for _, sp := range bins {
			row := int32((L - 1 + int(sp.bin)) * P)
			for range int(sp.n) {
				starts = append(starts, row)
			}
		}
		wk.starts = starts
		if sums.c[u][h]+total[h] > math.MaxUint16 {
			sums.drainUnit(s, u, h) // T ≤ C: the counts stay in 16 bits
		}
		sums.c[u][h] += total[h] // sums.pending was set by the fold
		fastmat.AddLaggedRows(sums.t[(2*u+h)*D:(2*u+h+1)*D], b.rows, starts, L)
	}
	return terms
}

// staIntSums is the two-level route's part of the cross sums, kept as integers
// until Flush drains it: per unit and half, C = Σ c_k and, per lagged pixel,
// T = Σ c_k·β, for the levels lo and hi.
type staIntSums struct {
	set     bool // lo and hi are fixed
	lo, hi  float64
	t       []uint16   // units × 2 × D
	c       [][2]int64 // per unit and half
	pending bool       // some C may not be zero
	drainer staDrain
}

// agree fixes the levels of the sums for a batch with levels lo and hi:
// kept when they hold the batch's, widened when the sums knew one level
// and the batch brings a second, and otherwise set anew after a drain.
func (b *staIntSums) agree(s *STA, lo, hi float64) {
	in := func(v float64) bool { return v == b.lo || v == b.hi }
	switch {
	case b.set && in(lo) && in(hi):
	case b.set && b.lo == b.hi && in(lo):
		b.hi = hi // no sum counted a second level yet: all T are 0
	case b.set && b.lo == b.hi && in(hi):
		b.hi = lo
	default:
		b.drain(s)
		b.set, b.lo, b.hi = true, lo, hi
	}
}

// grow sizes the sums for the STA's units.
func (b *staIntSums) grow(s *STA) {
	if len(b.c) < s.units {
		b.t = growZeroed(b.t, (s.units-len(b.c))*2*s.dim)
		b.c = append(b.c, make([][2]int64, s.units-len(b.c))...)
	}
}

// drain adds the integer sums to the float sums and zeroes them, the units
// spread over the cores.
func (b *staIntSums) drain(s *STA) {
	if !b.pending {
		return
	}
	b.drainer.s = s
	fastmat.Each(len(b.c), &b.drainer)
	b.drainer.s = nil
	b.pending = false
}

// drainUnit adds unit u's integer sums of half h to its float sums:
// hi·T + lo·(C − T) per lagged pixel.
func (b *staIntSums) drainUnit(s *STA, u, h int) {
	c := b.c[u][h]
	if c == 0 {
		return
	}
	D := s.dim
	t := b.t[(2*u+h)*D : (2*u+h+1)*D]
	dst := s.data[u*s.stride+h*D : u*s.stride+(h+1)*D]
	lo, hi := b.lo, b.hi
	for i, n := range t {
		// The conversions round each product on its own (no fused
		// multiply-add), the same on every platform.
		dst[i] += float64(hi*float64(n)) + float64(lo*float64(c-int64(n)))
	}
	clear(t)
	b.c[u][h] = 0
}

func (b *staIntSums) reset() {
	clear(b.t)
	clear(b.c)
	b.set, b.pending = false, false
}

// staDrain is the drain's task: a piece of work is one unit.
type staDrain struct{ s *STA }

func (d *staDrain) Do(u, _ int) {
	b := &d.s.intSums
	b.drainUnit(d.s, u, 0)
	b.drainUnit(d.s, u, 1)
}
