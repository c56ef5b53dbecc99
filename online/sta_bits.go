package online

import (
	"math"
	"math/bits"

	"livefield/online/internal/fastmat"
)

// The two-level route of the STA fold.
//
// When every row of a batch (its history rows and its bins' frames) takes
// one of two finite levels lo and hi, a pixel's value is lo + (hi−lo)·β with
// β ∈ {0, 1}, and a unit's cross sum over its spikes of a half is
//
//	Σ_k c_k·x(bin_k − l, p) = hi·T + lo·(C − T),
//	T = Σ_k c_k·β(bin_k − l, p) = Σ_m 2^m·popcount(plane_m & lagged(l, p)),
//	C = Σ_k c_k,
//
// where plane_m holds bit m of every bin's integer count (one bit per bin of
// the batch) and lagged(l, p) is the bit string over the batch's bins of
// "pixel p, l bins earlier, is at hi". The lagged strings are built once per
// batch (D strings of ⌈bins/64⌉ words); a unit then costs D·⌈bins/64⌉ word
// counts per bit plane instead of D multiply-adds per spike.
//
// T and C are integers and are kept as such from batch to batch
// (staBitSums: 32 bits per sum, half the memory traffic of the float sums,
// and no floating-point pass per batch); Flush, which every read calls,
// drains them into the float sums: hi·T and lo·(C−T) are each rounded once,
// their sum once and the addition to the float sum once. For levels and
// counts whose products and sums are integers (±1, 0/1 and integer counts)
// every step is exact and the sums equal the float route's bit for bit; for
// other levels the two routes differ by roundings only (within a few units
// in the last place of Σ|c_k·x|, see TestSTABitRoute).
//
// Counts that are not integers, and a bin's count of 2^staPlanes or more,
// take the float route, as do the spikes of a unit's half with spikes in
// fewer than minBins bins (cheaper as multiply-adds) and whole batches with a
// third level or a non-finite value. The levels are found per batch; a
// batch with other levels than those of the integer sums first drains them,
// so a stimulus that changes its levels (a grey pause before the noise)
// costs one drain and the float route for the batch that holds the change.

// staPlanes is the number of bit planes of a bin's count: counts 1…255 are
// counted by bits.
const staPlanes = 8

// staMinBins is the default of staFold.minBins for lagged strings of
// words words: the fewest bins with spikes of a unit's half for which one
// pass of fastmat.AndCount over the D lagged strings (all bit planes at
// once) costs less than a multiply-add pass per bin (BenchmarkSTAFold, at
// 256 bins: a pass costs about as much as 6 spikes with AVX-512 VPOPCNTQ,
// 12 with AVX2 and 32 in Go).
func staMinBins(words int) int {
	switch fastmat.AndCountClass() {
	case 2:
		return (3*words + 1) / 2
	case 1:
		return 3 * words
	}
	return 8 * words
}

// staBits is a batch's two-level description for its fold: its levels and
// the lagged bit strings of its pixels.
type staBits struct {
	ok     bool    // every row of the batch is two-level and finite
	lo, hi float64 // the levels (those of the integer sums)
	words  int     // words per lagged string: ⌈bins/64⌉
	// lagged holds word w of the string of lag l and pixel p at
	// lagged[w·D + l·P + p]: bit j is set when bin 64w+j's frame l bins
	// earlier has pixel p at hi.
	lagged []uint64
}

// staRows are a batch's rows as AddBin copies them: whether they are still
// two-level, how many levels they showed (0, 1, 2), which, and per pixel
// the rows at the second level (bit r of raw[p·stride:]).
type staRows struct {
	rowsOK       bool
	levels       int
	rowLo, rowHi float64
	stride       int
	raw          []uint64
}

// staWorker is one worker's scratch of a fold.
type staWorker struct {
	terms  []batchSpike // spikes for the float route
	planes []uint64     // [half][plane][word]: the bins' counts bit by bit
}

// startRows begins the rows of a new batch.
func (b *staRows) startRows(s *STA) {
	if b.raw == nil {
		b.stride = (s.lags - 1 + s.batchCap + 63) / 64
		b.raw = make([]uint64, s.pixels*b.stride)
	}
	clear(b.raw)
	b.rowsOK, b.levels = true, 0
}

// addRow looks at row r of the batch as AddBin copies it (while it is in
// cache): it keeps the batch's levels, sets the row's bits at the second
// level, and gives up on a third level or a non-finite value.
func (b *staRows) addRow(r int, row []float64) {
	if !b.rowsOK {
		return
	}
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
			return // one level so far: no bits to set
		}
	}
	lo, hi := b.rowLo, b.rowHi
	bit, w := uint64(1)<<(r&63), r>>6
	raw := b.raw[w:]
	fits := 0 // values at lo or hi
	for p, v := range row {
		// Conditional moves, no branches: noise is unpredictable.
		var m uint64
		atHi, atLo := 0, 0
		if v == hi {
			m, atHi = bit, 1
		}
		if v == lo {
			atLo = 1
		}
		raw[p*b.stride] |= m
		fits += atHi | atLo
	}
	if fits != len(row) {
		b.rowsOK = false // a third level or a non-finite value
	}
}

// prepare ends the rows r of a batch of n bins: when they are two-level it
// agrees the levels with the integer sums (draining them if they differ),
// builds the lagged strings and sets ok.
func (b *staBits) prepare(s *STA, r *staRows, n int) {
	P, L, N, D := s.pixels, s.lags, n, s.dim
	rows := L - 1 + N
	b.ok = false
	if !r.rowsOK || r.levels == 0 {
		return
	}
	if b.lagged == nil {
		b.lagged = make([]uint64, s.dim*((s.batchCap+63)/64))
	}
	lo, hi := r.rowLo, r.rowLo
	if r.levels == 2 {
		hi = r.rowHi
	}
	sums := &s.bitSums
	sums.agree(s, lo, hi)
	b.lo, b.hi = sums.lo, sums.hi
	rw := (rows + 63) / 64
	if lo == b.hi && b.hi != b.lo {
		// The row bits mark the batch's second level, which is the sums'
		// lo: mark the sums' hi instead.
		for p := range P {
			src := r.raw[p*r.stride : p*r.stride+rw]
			for w := range src {
				valid := ^uint64(0)
				if left := rows - 64*w; left < 64 {
					valid = 1<<left - 1
				}
				src[w] ^= valid
			}
		}
	}
	b.words = (N + 63) / 64
	// Bin j's lag l is row L−1+j−l: string (l, p) is pixel p's row bits
	// from row L−1−l on.
	for w := range b.words {
		out := b.lagged[w*D : (w+1)*D]
		for l := range L {
			off := L - 1 - l + 64*w
			i, sh := off>>6, uint(off&63)
			for p := range P {
				src := r.raw[p*r.stride : p*r.stride+rw]
				v := src[i] >> sh
				if sh != 0 && i+1 < rw {
					v |= src[i+1] << (64 - sh)
				}
				out[l*P+p] = v
			}
		}
	}
	b.ok = true
}

// grow sizes a worker's scratch for an STA.
func (wk *staWorker) grow(s *STA) {
	words := (s.batchCap + 63) / 64
	if len(wk.planes) < 2*staPlanes*words {
		wk.planes = make([]uint64, 2*staPlanes*words)
	}
}

// addBits adds unit u's spikes of the batch to its sums by bit counts and
// returns terms with the spikes left for the float route appended.
func (f *staFold) addBits(u int, spikes []int32, wk *staWorker, terms []batchSpike) []batchSpike {
	s, b := f.s, &f.bits
	W, D := b.words, s.dim
	planes := wk.planes[:2*staPlanes*W]
	clear(planes)
	all := f.batch.spikes
	for a := 0; a < len(spikes); {
		// The unit's entries of one bin (in bin order): their integer
		// counts add up, bit by bit into the planes.
		first := all[spikes[a]]
		var sum float64
		for ; a < len(spikes) && all[spikes[a]].bin == first.bin; a++ {
			sp := all[spikes[a]]
			if sp.n == math.Trunc(sp.n) && sp.n < 1<<staPlanes {
				sum += sp.n
				continue
			}
			terms = append(terms, sp)
		}
		switch {
		case sum == 0:
		case sum >= 1<<staPlanes:
			first.n = sum
			terms = append(terms, first)
		default:
			j := int(first.bin)
			at := int(first.half)*staPlanes*W + j>>6
			for c := uint(sum); c != 0; c &= c - 1 {
				planes[at+bits.TrailingZeros(c)*W] |= 1 << (j & 63)
			}
		}
	}
	sums := &s.bitSums
	minBins := f.minBins
	if minBins == 0 {
		minBins = staMinBins(W)
	}
	for h := range 2 {
		half := planes[h*staPlanes*W : (h+1)*staPlanes*W]
		var total int64 // C of the batch: Σ_m 2^m · bins of plane m
		top, bins := 0, 0
		for m := range staPlanes {
			nb := 0
			for _, x := range half[m*W : (m+1)*W] {
				nb += bits.OnesCount64(x)
			}
			if nb > 0 {
				total += int64(nb) << m
				top = m + 1
			}
		}
		if total == 0 {
			continue
		}
		for w := range W {
			var any uint64
			for m := range top {
				any |= half[m*W+w]
			}
			bins += bits.OnesCount64(any)
		}
		if bins < minBins {
			// Few spikes: cheaper as multiply-adds.
			for w := range W {
				var any uint64
				for m := range top {
					any |= half[m*W+w]
				}
				for ; any != 0; any &= any - 1 {
					bit := bits.TrailingZeros64(any)
					c := 0
					for m := range top {
						c |= int(half[m*W+w]>>bit&1) << m
					}
					terms = append(terms, batchSpike{unit: int32(u), bin: int32(w*64 + bit), half: int32(h), n: float64(c)})
				}
			}
			continue
		}
		if sums.c[u][h]+total > math.MaxUint32 {
			sums.drainUnit(s, u, h) // T ≤ C: the counts stay in 32 bits
		}
		sums.c[u][h] += total // sums.pending was set by the fold
		fastmat.AndCount(sums.t[(2*u+h)*D:(2*u+h+1)*D], b.lagged[:W*D], half[:top*W], W)
	}
	return terms
}

// staBitSums is the bit route's part of the cross sums, kept as integers
// until Flush drains it: per unit and half, C = Σ c_k and, per lagged pixel,
// T = Σ c_k·β, for the levels lo and hi.
type staBitSums struct {
	set     bool // lo and hi are fixed
	lo, hi  float64
	t       []uint32   // units × 2 × D
	c       [][2]int64 // per unit and half
	pending bool       // some C may not be zero
	drainer staDrain
}

// agree fixes the levels of the sums for a batch with levels lo and hi:
// kept when they hold the batch's, widened when the sums knew one level
// and the batch brings a second, and otherwise set anew after a drain.
func (b *staBitSums) agree(s *STA, lo, hi float64) {
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
func (b *staBitSums) grow(s *STA) {
	if len(b.c) < s.units {
		b.t = append(b.t, make([]uint32, (s.units-len(b.c))*2*s.dim)...)
		b.c = append(b.c, make([][2]int64, s.units-len(b.c))...)
	}
}

// drain adds the integer sums to the float sums and zeroes them, the units
// spread over the cores.
func (b *staBitSums) drain(s *STA) {
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
func (b *staBitSums) drainUnit(s *STA, u, h int) {
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

func (b *staBitSums) reset() {
	clear(b.t)
	clear(b.c)
	b.set, b.pending = false, false
}

// staDrain is the drain's task: a piece of work is one unit.
type staDrain struct{ s *STA }

func (d *staDrain) Do(u, _ int) {
	b := &d.s.bitSums
	b.drainUnit(d.s, u, 0)
	b.drainUnit(d.s, u, 1)
}
