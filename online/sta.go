package online

import (
	"fmt"
	"math"
	"slices"
	"sync"

	gfloats "gonum.org/v1/gonum/floats"

	"livefield/online/internal/fastmat"
)

// STA accumulates, for every unit, the sums behind the spike-triggered
// average of a lagged stimulus, kept separately for split-half A and B, and
// the spike-count autocovariance at lags 0…L−1 that the white-noise null
// needs (see WhiteTest).
//
// The cross sums Σ y x of a unit are not added bin by bin as they come (one
// pass over the unit's D sums per spike, which at hundreds of units is bound
// by memory): AddBin keeps the frames of up to 256 consecutive bins (with the
// lags−1 frames before them) and the bins' non-zero counts, and a fold adds
// each spike's lagged frames into its unit's sums, unit by unit and lag by
// lag, so that a unit's sums are passed once per batch while the frames stay
// in cache. The work is proportional to the spikes (spikes·D additions), not
// to units·bins as a dense product of counts and rows would be: at the
// reference workload (10 spikes/s in 60 Hz bins) about one count in six is
// non-zero. A batch of two-level frames (binary noise) is folded by integer
// counts instead: per unit, 16-bit additions of the 0/1 rows of its spike
// bins at every lag, into integer sums that reads drain into the float
// sums (sta_levels.go); the sums are the same, exactly so for ±1 or
// 0/1 levels and integer counts. The fold also adds the batch's lagged
// rows to the stimulus sums Σx of their halves (as integers, too, for a
// two-level batch). Units are spread over the cores by fastmat.Each, and
// the fold of a full batch runs on a goroutine of its own while AddBin
// fills the next batch: one fold at a time, in batch order, so the sums
// are those of folding in line; reads, Grow and Reset wait for it. A bin
// whose lagged row is not the shift of the previous bin's (a restarted lag
// history) starts a new batch. Per bin AddBin costs a copy of one frame, D
// comparisons to find out whether the row is a shift (skipped for the
// Mapper, which knows, and which then hands over the newest frame alone)
// and P comparisons for the two-level check. Units are indices
// 0…Units()−1 and grow when a larger index arrives (a new unit's earlier
// counts are zero). An STA is not safe for concurrent use, except for
// reads from several goroutines after CacheMeans.
type STA struct {
	pixels, lags, dim int

	n    [2]int64     // bins per half: [0] = half A, [1] = half B
	sumX [2][]float64 // Σx per half, D each, added by the folds (read after Flush)

	units  int
	stride int           // floats per unit in data
	data   []float64     // per unit: Σyx A (D), Σyx B (D)
	counts *countAutocov // the counts' lag products at lags 0…L−1 (nil for L = 0)
	// countsShared: counts belongs to the owner (shareCounts), who adds
	// every bin's counts to it; AddBin does not.
	countsShared bool
	sy           [][2]float64 // Σy per half

	rejected int64

	// Means cached by CacheMeans: [0] half A, [1] half B, [2] all bins,
	// valid while the bin counts equal meanN.
	mean  [3][]float64
	meanN [2]int64

	// The batches of bins not yet in the cross sums: batches[fill] takes
	// AddBin's bins while the other one may still be folding on a
	// goroutine of its own (folding), one fold at a time, in batch order.
	// fold is the scratch of a fold.
	batchCap int
	batches  [2]staBatch
	fill     int
	folding  sync.WaitGroup
	foldNext func() // folds the other batch; made once, so that starting a fold does not allocate
	fold     staFold
	intSums  staIntSums // the two-level route's integer part of the cross sums
}

// staBatch is a batch of bins: their frames, the first lags−1 rows being
// the history before the batch's first bin, their number, their non-zero
// counts in bin order, and the rows' two-level description.
type staBatch struct {
	frames []float64 // (lags−1+batchCap) × pixels
	n      int
	halves []uint8 // per bin, its half (0 = A, 1 = B)
	spikes []batchSpike
	rows   staRows
}

// staBatchBins is the number of bins folded into the cross sums at once:
// their frames (at 16×16 pixels and 12 lags, 0.5 MB) stay in the core's
// cache while each unit's sums (units·D values, streamed from memory by
// every fold) are passed once per 256 bins.
const staBatchBins = 256

// batchSpike is one non-zero count of a batch: the unit, the bin's row in
// the batch, the half and the count.
type batchSpike struct {
	unit int32
	bin  int32
	half int32
	n    float64
}

// Layout of one unit's block in STA.data.
const (
	staA = iota
	staB
)

// NewSTA returns an empty accumulator for frames of the given number of
// pixels and lags (D = pixels·lags). Non-positive sizes give an accumulator
// of dimension zero.
func NewSTA(pixels, lags int) *STA {
	pixels, lags = max(pixels, 0), max(lags, 0)
	d := pixels * lags
	s := &STA{
		pixels:   pixels,
		lags:     lags,
		dim:      d,
		sumX:     [2][]float64{make([]float64, d), make([]float64, d)},
		stride:   2 * d,
		batchCap: staBatchBins,
	}
	s.foldNext = func() {
		defer s.folding.Done()
		s.fold.run(s, &s.batches[1-s.fill])
	}
	return s
}

// Dim is D = pixels·lags, the length of x and of every estimate.
func (s *STA) Dim() int { return s.dim }

// Lags is L, the number of lags per pixel.
func (s *STA) Lags() int { return s.lags }

// Units is the number of units seen (the largest index plus one, or the
// number passed to Grow).
func (s *STA) Units() int { return s.units }

// Bins is the number of bins added since the last Reset.
func (s *STA) Bins() int64 { return s.n[0] + s.n[1] }

// HalfBins is the number of bins in half A and in half B.
func (s *STA) HalfBins() (a, b int64) { return s.n[0], s.n[1] }

// Rejected counts the counts that AddBin ignored: a negative unit index or
// a count that is negative, NaN or infinite.
func (s *STA) Rejected() int64 { return s.rejected }

// Spikes is the total count of unit u over all bins (0 for an unknown unit).
func (s *STA) Spikes(u int) float64 {
	if u < 0 || u >= s.units {
		return 0
	}
	return s.sy[u][0] + s.sy[u][1]
}

// HalfSpikes is the count of unit u in half A and in half B.
func (s *STA) HalfSpikes(u int) (a, b float64) {
	if u < 0 || u >= s.units {
		return 0, 0
	}
	return s.sy[u][0], s.sy[u][1]
}

// Grow makes room for at least units units, so that the first spikes of
// known units do not allocate inside AddBin. Storage grows by amortised
// doubling.
func (s *STA) Grow(units int) {
	if units <= s.units {
		return
	}
	s.folding.Wait() // the fold writes the sums being grown
	add := units - s.units
	s.data = growZeroed(s.data, add*s.stride)
	if s.lags > 0 {
		if s.counts == nil {
			s.counts = newCountAutocov(s.lags - 1)
		}
		s.counts.grow(units)
	}
	s.sy = append(s.sy, make([][2]float64, add)...)
	s.units = units
}

// growZeroed extends v by n zeros, doubling its capacity when it must
// grow. Units arrive one by one; append's growth of large slices by a
// quarter at a time copied the STA's sums (19 MB at 384 units) about 25
// times and touched 95 MB of fresh memory, 0.14 s of an export's CPU.
func growZeroed[T any](v []T, n int) []T {
	if len(v)+n > cap(v) {
		w := make([]T, len(v), max(2*cap(v), len(v)+n))
		copy(w, v)
		v = w
	}
	v = v[:len(v)+n]
	clear(v[len(v)-n:])
	return v
}

// shareCounts makes the STA read its count lag products from c, which
// covers at least lags 0…L−1 of the same bins and to which the owner adds
// every bin's counts (the Mapper's calibration keeps lags 0…32).
func (s *STA) shareCounts(c *countAutocov) {
	if s.lags == 0 || c == nil || c.k < s.lags-1 {
		return
	}
	s.counts, s.countsShared = c, true
}

// Flush folds the batched bins into the cross sums and drains the
// two-level route's integer sums into them. Reads call it themselves;
// CacheMeans too, so that reads from several goroutines after it find
// nothing to fold.
func (s *STA) Flush() {
	s.foldBatch()
	s.folding.Wait()
	s.intSums.drain(s)
}

// foldBatch starts the fold of the batched bins into the cross sums (the
// two-level route's part into its integer sums, see sta_levels.go) on a
// goroutine of its own, once the previous fold is done, and gives AddBin
// the other batch. The fold runs while AddBin fills that batch: everything it writes
// (the sums, the integer sums, its scratch) is read or grown only after
// s.folding.Wait (Flush, Grow, Reset and the next foldBatch).
func (s *STA) foldBatch() {
	b := &s.batches[s.fill]
	if b.n == 0 {
		return // nothing to fold, and nothing written: reads may run concurrently
	}
	s.folding.Wait()
	s.fill = 1 - s.fill
	if s.dim > 0 {
		s.folding.Add(1)
		go s.foldNext()
		return
	}
	b.spikes, b.n = b.spikes[:0], 0
}

// staFold adds a batch's spikes to the cross sums, the units spread over
// the cores (fastmat.Each): the spikes are grouped by unit (a counting
// sort), and a piece of work is one unit. A batch of two-level frames goes
// by integer counts (sta_levels.go), others by multiply-adds (addFloat).
type staFold struct {
	s     *STA
	first []int32 // per unit, its first spike in order; len units+1
	order []int32 // spike indices grouped by unit, in bin order within a unit
	busy  []int32 // units with spikes in this batch, in unit order

	batch      *staBatch // the batch being folded
	levels     staLevels
	work       []staWorker // per fastmat worker
	minBins    int         // fewest bins with spikes of a unit's half counted as integers (0: every half)
	floatOnly  bool        // every batch by multiply-adds (tests compare the routes)
	stimT      []uint16    // a half's integer stimulus sums of a two-level batch
	stimStarts []int32     // the rows of a half's bins
	batches    [2]int64    // batches folded by multiply-adds [0] and by integer counts [1]
}

func (f *staFold) run(s *STA, b *staBatch) {
	f.s, f.batch = s, b
	if cap(f.first) < s.units+1 {
		f.first = make([]int32, s.units+1, 2*s.units+1)
	}
	f.first = f.first[:s.units+1]
	clear(f.first)
	for _, sp := range b.spikes {
		f.first[sp.unit+1]++
	}
	f.busy = f.busy[:0]
	for u := range s.units {
		if f.first[u+1] > 0 {
			f.busy = append(f.busy, int32(u))
		}
		f.first[u+1] += f.first[u]
	}
	f.order = slices.Grow(f.order[:0], len(b.spikes))[:len(b.spikes)]
	next := f.first[:s.units] // advanced while placing; restored below
	for i, sp := range b.spikes {
		f.order[next[sp.unit]] = int32(i)
		next[sp.unit]++
	}
	for u := s.units; u > 0; u-- { // next[u] is now first[u+1]: shift back
		f.first[u] = f.first[u-1]
	}
	f.first[0] = 0
	f.levels.ok = false
	if !f.floatOnly {
		f.levels.prepare(s, &b.rows)
	}
	if f.work == nil {
		f.work = make([]staWorker, fastmat.Workers())
	}
	if f.levels.ok {
		f.batches[1]++
		for w := range f.work {
			f.work[w].grow(s)
		}
		s.intSums.grow(s)
		s.intSums.pending = true // before the workers: they only add to the sums
	} else {
		f.batches[0]++
	}
	fastmat.Each(len(f.busy), f)
	f.addStimulusSums(s, b)
	b.spikes, b.n = b.spikes[:0], 0
	f.s, f.batch = nil, nil
}

// addStimulusSums adds the batch's lagged rows to the stimulus sums Σx of
// their halves. A two-level batch counts them as integers, as a unit that
// fires once in every bin of its half would be (16-bit sums: at most
// staBatchBins per value), and adds hi·T + lo·(n − T) per value; other
// batches, and those the units' rule would fold by multiply-adds
// (integerMinBins), add the rows as they are.
func (f *staFold) addStimulusSums(s *STA, b *staBatch) {
	P, L, D := s.pixels, s.lags, s.dim
	if f.levels.ok && b.n >= f.integerMinBins() {
		if len(f.stimT) < D {
			f.stimT = make([]uint16, D)
		}
		t := f.stimT[:D]
		for h := range 2 {
			f.stimStarts = f.stimStarts[:0]
			for j, hj := range b.halves[:b.n] {
				if int(hj) == h {
					f.stimStarts = append(f.stimStarts, int32((L-1+j)*P))
				}
			}
			n := len(f.stimStarts)
			if n == 0 {
				continue
			}
			clear(t)
			fastmat.AddLaggedRows(t, f.levels.rows, f.stimStarts, L)
			lo, hi, sum := f.levels.lo, f.levels.hi, s.sumX[h]
			for i, v := range t {
				// Each product rounded on its own, as in the drain of the
				// cross sums (staIntSums.drainUnit).
				sum[i] += float64(hi*float64(v)) + float64(lo*float64(n-int(v)))
			}
		}
		return
	}
	for j, h := range b.halves[:b.n] {
		sum := s.sumX[h]
		for l := range L {
			row := (L - 1 + j - l) * P
			gfloats.Add(sum[l*P:(l+1)*P], b.frames[row:row+P])
		}
	}
}

// Do adds the batch's spikes of the i-th busy unit to its sums, on
// worker w: by integer counts when the batch is two-level, the spikes left
// over (and all of a batch with more levels) by multiply-adds.
func (f *staFold) Do(i, w int) {
	s := f.s
	u := int(f.busy[i])
	spikes := f.order[f.first[u]:f.first[u+1]]
	wk := &f.work[w]
	terms := wk.terms[:0]
	if f.levels.ok {
		terms = f.addLevels(u, spikes, wk, terms)
	} else {
		for _, k := range spikes {
			terms = append(terms, f.batch.spikes[k])
		}
	}
	s.addFloat(u, terms, f.batch.frames)
	wk.terms = terms[:0]
}

// addFloat adds the spikes (all of unit u) to u's sums: per half and lag,
// the counts times the frame lag bins earlier, four spikes at a time
// (fastmat.AddScaled4), so that one lag's P sums are loaded and stored
// once per four spikes.
func (s *STA) addFloat(u int, spikes []batchSpike, frames []float64) {
	if len(spikes) == 0 {
		return
	}
	P, L, d := s.pixels, s.lags, s.dim
	base := u * s.stride
	var a [4]float64
	var rows [4][]float64
	for h := range int32(2) {
		for l := range L {
			dst := s.data[base+int(h)*d+l*P : base+int(h)*d+(l+1)*P]
			n := 0 // spikes gathered in a and rows
			for k := range spikes {
				sp := &spikes[k]
				if sp.half != h {
					continue
				}
				row := (L - 1 + int(sp.bin) - l) * P
				a[n], rows[n] = sp.n, frames[row:row+P]
				if n++; n == 4 {
					fastmat.AddScaled4(dst, &a, &rows)
					n = 0
				}
			}
			for i := range n {
				fastmat.AddScaled(dst, a[i], rows[i])
			}
		}
	}
}

// startBatch begins a batch at the bin whose lagged row is x: the history
// rows are its earlier lags, oldest first.
func (s *STA) startBatch(x []float64) {
	P, L := s.pixels, s.lags
	b := &s.batches[s.fill]
	if b.frames == nil {
		b.frames = make([]float64, (L-1+s.batchCap)*P)
		b.halves = make([]uint8, s.batchCap)
	}
	b.rows.startRows(s)
	for r := range L - 1 {
		l := L - 1 - r
		copy(b.frames[r*P:(r+1)*P], x[l*P:(l+1)*P])
		b.rows.addRow(r, x[l*P:(l+1)*P])
	}
}

// continues reports whether x is the shift of the batch's rows: its lag l
// is the frame of the bin l bins before.
func (s *STA) continues(x []float64) bool {
	b := &s.batches[s.fill]
	P, L, j := s.pixels, s.lags, b.n
	for l := 1; l < L; l++ {
		row := (L - 1 + j - l) * P
		if !slices.Equal(x[l*P:(l+1)*P], b.frames[row:row+P]) { // a NaN never equals: a new batch
			return false
		}
	}
	return true
}

// block returns unit u's cross sums of half part (staA or staB).
func (s *STA) block(u, part int) []float64 {
	off := u*s.stride + part*s.dim
	return s.data[off : off+s.dim : off+s.dim]
}

// AddBin adds one bin: x is the lagged stimulus (length Dim, lag-major),
// halfA tells which split half the bin belongs to, and counts are the
// non-zero spike counts of the bin (a unit may appear more than once; its
// counts add). A wrong length of x is a programming error and panics.
// AddBin does not allocate unless a new unit index arrives.
func (s *STA) AddBin(x []float64, halfA bool, counts []Count) {
	s.addBin(x, halfA, counts, false)
}

// addBin is AddBin for a caller that knows whether x is the shift of the
// previous bin's lagged row (the Mapper, which builds x from its ring of
// frames): shifted skips the comparison of the lags, D values per bin.
func (s *STA) addBin(x []float64, halfA bool, counts []Count, shifted bool) {
	if len(x) != s.dim {
		panic(fmt.Sprintf("online: STA.AddBin: len(x) = %d, want %d", len(x), s.dim))
	}
	if s.dim > 0 {
		if s.batches[s.fill].n > 0 && !shifted && !s.continues(x) {
			s.foldBatch()
		}
		if s.batches[s.fill].n == 0 {
			s.startBatch(x)
		}
	}
	s.addFrame(x[:s.pixels], halfA, counts)
}

// canShift reports whether the batch in hand holds the earlier lags of a
// bin that follows its last one, so that addShifted can take the bin.
func (s *STA) canShift() bool { return s.dim > 0 && s.batches[s.fill].n > 0 }

// addShifted adds a bin whose lagged row is the shift of the previous
// bin's, given its newest frame only (P values): the batch holds the rest.
// Only when canShift.
func (s *STA) addShifted(frame []float64, halfA bool, counts []Count) {
	if len(frame) != s.pixels || !s.canShift() {
		panic("online: STA.addShifted without the previous bin's lags")
	}
	s.addFrame(frame, halfA, counts)
}

// addFrame adds a bin to the batch in hand, which holds its earlier lags:
// its newest frame, its half and its counts.
func (s *STA) addFrame(frame []float64, halfA bool, counts []Count) {
	h := 1
	if halfA {
		h = 0
	}
	k := s.n[0] + s.n[1] // index of this bin
	b := &s.batches[s.fill]
	j := b.n // row of this bin in the batch
	if s.dim > 0 {
		row := (s.lags - 1 + j) * s.pixels
		copy(b.frames[row:row+s.pixels], frame)
		b.rows.addRow(s.lags-1+j, frame)
		b.halves[j] = uint8(h)
	}
	for _, c := range counts {
		y := c.N
		if c.Unit < 0 || y < 0 || math.IsNaN(y) || math.IsInf(y, 0) {
			s.rejected++
			continue
		}
		if y == 0 {
			continue
		}
		u := c.Unit
		if u >= s.units {
			s.Grow(u + 1)
		}
		b.spikes = append(b.spikes, batchSpike{unit: int32(u), bin: int32(j), half: int32(h), n: y})
		s.sy[u][h] += y
		if s.counts != nil && !s.countsShared {
			s.counts.add(u, k, y)
		}
	}
	s.n[h]++
	if b.n++; b.n == s.batchCap {
		s.foldBatch()
	}
}

// meanTo writes the mean stimulus of the given halves into dst.
func (s *STA) meanTo(dst []float64, halves ...int) bool {
	if s.meanN == s.n && s.mean[2] != nil {
		which := 2
		if len(halves) == 1 {
			which = halves[0]
		}
		copy(dst, s.mean[which])
		return s.n[0]+s.n[1] > 0
	}
	s.Flush() // the folds add the stimulus sums
	return s.computeMeanTo(dst, halves...)
}

// CacheMeans computes the mean lagged stimulus of each half and of all bins
// once, for the reads that follow until the next AddBin. Call it before
// reading many units from several goroutines: the reads then share the
// cache without writing to it.
func (s *STA) CacheMeans() {
	s.Flush()
	for i := range s.mean {
		if len(s.mean[i]) != s.dim {
			s.mean[i] = make([]float64, s.dim)
		}
	}
	s.computeMeanTo(s.mean[0], 0)
	s.computeMeanTo(s.mean[1], 1)
	s.computeMeanTo(s.mean[2], 0, 1)
	s.meanN = s.n
}

func (s *STA) computeMeanTo(dst []float64, halves ...int) bool {
	var n int64
	for _, h := range halves {
		n += s.n[h]
	}
	if n == 0 {
		clear(dst)
		return false
	}
	inv := 1 / float64(n)
	for i := range dst {
		var t float64
		for _, h := range halves {
			t += s.sumX[h][i]
		}
		dst[i] = t * inv
	}
	return true
}

func (s *STA) checkDst(name string, dst []float64) {
	if len(dst) != s.dim {
		panic(fmt.Sprintf("online: STA.%s: len(dst) = %d, want %d", name, len(dst), s.dim))
	}
}

// STATo writes the spike-triggered average of unit u into dst (length Dim):
// Σ_k y_k x_k / Σ_k y_k − x̄, with x̄ the mean stimulus over all bins. It
// writes zeros when the unit has no spikes.
func (s *STA) STATo(dst []float64, u int) {
	s.checkDst("STATo", dst)
	s.CrossTo(dst, u)
	if ny := s.Spikes(u); ny > 0 {
		inv := 1 / ny
		for i := range dst {
			dst[i] *= inv
		}
	}
}

// HalvesTo writes the spike-triggered averages of unit u from half A's bins
// into a and from half B's bins into b, each centred on its own half's mean
// stimulus. A half without spikes of the unit gives zeros.
func (s *STA) HalvesTo(a, b []float64, u int) {
	s.checkDst("HalvesTo", a)
	s.checkDst("HalvesTo", b)
	s.Flush()
	ya, yb := s.HalfSpikes(u)
	for h, dst := range [2][]float64{a, b} {
		ny := [2]float64{ya, yb}[h]
		if ny == 0 {
			clear(dst)
			continue
		}
		s.meanTo(dst, h)
		sxy := s.block(u, staA+h)[:len(dst)]
		inv := 1 / ny
		for i := range dst {
			dst[i] = sxy[i]*inv - dst[i]
		}
	}
}

// CrossTo writes the centred cross-correlation of unit u into dst:
// Σ_k y_k (x_k − x̄) = Σ_k (y_k − ȳ) x_k over all bins.
func (s *STA) CrossTo(dst []float64, u int) {
	s.checkDst("CrossTo", dst)
	ny := s.Spikes(u)
	if ny == 0 {
		clear(dst)
		return
	}
	s.Flush()
	s.meanTo(dst, 0, 1)
	a, b := s.block(u, staA), s.block(u, staB)
	for i := range dst {
		dst[i] = a[i] + b[i] - ny*dst[i]
	}
}

// AutocovTo writes into dst (length Lags) the centred autocovariance of unit
// u's spike counts over all bins, A(d) = Σ_k (y_k − ȳ)(y_{k+d} − ȳ), the sum
// over the pairs of bins k, k+d that both were added. A(0) = Σ (y_k − ȳ)².
func (s *STA) AutocovTo(dst []float64, u int) {
	if len(dst) != s.lags {
		panic(fmt.Sprintf("online: STA.AutocovTo: len(dst) = %d, want %d", len(dst), s.lags))
	}
	clear(dst)
	m := s.Bins()
	if u < 0 || u >= s.units || m == 0 {
		return
	}
	if s.counts != nil {
		s.counts.autocovTo(dst, u, m, s.Spikes(u))
	}
}

// Reset forgets all sums; units stay known and their storage is kept.
func (s *STA) Reset() {
	s.folding.Wait()
	s.n = [2]int64{}
	clear(s.sumX[0])
	clear(s.sumX[1])
	clear(s.data)
	if s.counts != nil {
		s.counts.reset()
	}
	clear(s.sy)
	s.intSums.reset()
	for i := range s.batches {
		s.batches[i].spikes, s.batches[i].n = s.batches[i].spikes[:0], 0
	}
	s.rejected = 0
	s.meanN = [2]int64{-1, -1} // the cached means are stale
}
