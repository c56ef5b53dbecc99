package online

import (
	"fmt"
	"math"

	gfloats "gonum.org/v1/gonum/floats"

	"livefield/online/internal/fastmat"
)

// STA accumulates, for every unit, the sums behind the spike-triggered
// average of a lagged stimulus, kept separately for split-half A and B, and
// the spike-count autocovariance at lags 0…L−1 that the white-noise null
// needs (see WhiteTest).
//
// The cross sums Σ y x of a unit are not added bin by bin (one pass over the
// unit's D sums per spike, which at hundreds of units is bound by memory):
// AddBin keeps the lagged rows of up to 256 bins of each half and the units'
// counts in them, and folds them into the sums by one product on the matrix
// kernel (counts × rows, spread over the cores by fastmat.MulAdd) when the
// batch is full and before any read of the sums. Per bin it costs a copy of
// x and D additions for the stimulus sums; per batch 2·units·D·bins flops at
// the kernel's speed. Units are indices 0…Units()−1 and grow when a larger
// index arrives (a new unit's earlier counts are zero). An STA is not safe
// for concurrent use, except for reads from several goroutines after
// CacheMeans.
type STA struct {
	pixels, lags, dim int

	n    [2]int64     // bins per half: [0] = half A, [1] = half B
	sumX [2][]float64 // Σx per half, D each

	units  int
	stride int          // floats per unit in data
	data   []float64    // per unit: Σyx A (D), Σyx B (D), S_d (L), head (L), ring (L)
	stamp  []int64      // per unit: bin index held in each ring slot (L)
	sy     [][2]float64 // Σy per half

	rejected int64

	// Means cached by CacheMeans: [0] half A, [1] half B, [2] all bins,
	// valid while the bin counts equal meanN.
	mean  [3][]float64
	meanN [2]int64

	// The batch of bins not yet in the cross sums, per half: the lagged rows
	// (batchCap rows of D) and the counts (one row of batchCap per unit,
	// column j = bin j of the batch).
	batchCap  int
	batchRows [2][]float64
	batchY    [2][]float64
	batchN    [2]int
}

// staBatchBins is the number of bins of a half folded into the cross sums
// by one product: the kernel's inner block (one packed slab), so that the
// sums (units·D values, streamed from memory by every fold) are passed once
// per 256 bins.
const staBatchBins = 256

// Layout of one unit's block in STA.data.
const (
	staA = iota
	staB
	staLag
	staHead
	staRing
)

// NewSTA returns an empty accumulator for frames of the given number of
// pixels and lags (D = pixels·lags). Non-positive sizes give an accumulator
// of dimension zero.
func NewSTA(pixels, lags int) *STA {
	pixels, lags = max(pixels, 0), max(lags, 0)
	d := pixels * lags
	return &STA{
		pixels:   pixels,
		lags:     lags,
		dim:      d,
		sumX:     [2][]float64{make([]float64, d), make([]float64, d)},
		stride:   2*d + 3*lags,
		batchCap: staBatchBins,
	}
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
	add := units - s.units
	s.data = append(s.data, make([]float64, add*s.stride)...)
	old := len(s.stamp)
	s.stamp = append(s.stamp, make([]int64, add*s.lags)...)
	for i := old; i < len(s.stamp); i++ {
		s.stamp[i] = -1
	}
	s.sy = append(s.sy, make([][2]float64, add)...)
	s.units = units
	for h, old := range s.batchY { // one row per unit: the old rows stay
		s.batchY[h] = make([]float64, units*s.batchCap)
		copy(s.batchY[h], old)
	}
}

// Flush folds the batched bins into the cross sums. Reads call it
// themselves; CacheMeans too, so that reads from several goroutines after it
// find nothing to fold.
func (s *STA) Flush() {
	s.flushHalf(0)
	s.flushHalf(1)
}

// flushHalf adds counts × rows of half h's batch to the half's cross sums
// (unit u's at data[u·stride + h·D], stride apart) and empties the batch.
func (s *STA) flushHalf(h int) {
	n := s.batchN[h]
	if n == 0 {
		return
	}
	d, c := s.dim, s.batchCap
	if s.units > 0 && d > 0 {
		fastmat.MulAdd(s.units, d, n, 1, s.batchY[h], c, s.batchRows[h], d, s.data[h*d:], s.stride)
	}
	for u := range s.units {
		clear(s.batchY[h][u*c : u*c+n])
	}
	s.batchN[h] = 0
}

// block returns the section of unit u's storage that starts at part.
func (s *STA) block(u, part int) []float64 {
	base := u * s.stride
	var off, n int
	switch part {
	case staA:
		off, n = 0, s.dim
	case staB:
		off, n = s.dim, s.dim
	default:
		off, n = 2*s.dim+(part-staLag)*s.lags, s.lags
	}
	return s.data[base+off : base+off+n : base+off+n]
}

// AddBin adds one bin: x is the lagged stimulus (length Dim, lag-major),
// halfA tells which split half the bin belongs to, and counts are the
// non-zero spike counts of the bin (a unit may appear more than once; its
// counts add). A wrong length of x is a programming error and panics.
// AddBin does not allocate unless a new unit index arrives.
func (s *STA) AddBin(x []float64, halfA bool, counts []Count) {
	if len(x) != s.dim {
		panic(fmt.Sprintf("online: STA.AddBin: len(x) = %d, want %d", len(x), s.dim))
	}
	h := 1
	if halfA {
		h = 0
	}
	k := s.n[0] + s.n[1]               // index of this bin
	gfloats.Add(s.sumX[h][:len(x)], x) // gonum's vector kernels: this is the message path
	if s.batchRows[h] == nil {
		s.batchRows[h] = make([]float64, s.batchCap*s.dim)
	}
	j := s.batchN[h] // column of this bin in the batch
	copy(s.batchRows[h][j*s.dim:(j+1)*s.dim], x)
	L := int64(s.lags)
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
		s.batchY[h][u*s.batchCap+j] += y
		s.sy[u][h] += y
		if s.lags == 0 {
			continue
		}
		lag := s.block(u, staLag)
		ring := s.block(u, staRing)
		stamp := s.stamp[u*s.lags : (u+1)*s.lags]
		slot := int(k % L)
		cur := 0.0
		if stamp[slot] == k {
			cur = ring[slot]
		}
		// S_d = Σ_k y_k y_{k−d}: the new count pairs with the earlier bins
		// in the ring; at d = 0 it also pairs with what this bin already had.
		lag[0] += y * (2*cur + y)
		for d := int64(1); d < L && d <= k; d++ {
			j := int((k - d) % L)
			if stamp[j] == k-d {
				lag[d] += y * ring[j]
			}
		}
		stamp[slot] = k
		ring[slot] = cur + y
		if k < L {
			s.block(u, staHead)[k] += y
		}
	}
	s.n[h]++
	if s.batchN[h]++; s.batchN[h] == s.batchCap {
		s.flushHalf(h)
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
	sy := s.Spikes(u)
	mean := sy / float64(m)
	lag := s.block(u, staLag)
	head := s.block(u, staHead)
	ring := s.block(u, staRing)
	stamp := s.stamp[u*s.lags : (u+1)*s.lags]
	L := int64(s.lags)
	var headSum, tailSum float64 // counts of the first d and the last d bins
	for d := int64(0); d < L && d < m; d++ {
		if d > 0 {
			headSum += head[d-1]
			j := m - d // the d-th bin from the end
			if sl := int(j % L); stamp[sl] == j {
				tailSum += ring[sl]
			}
		}
		// Σ_{k<m−d} y_k = Sy − tail_d and Σ_{k≥d} y_k = Sy − head_d.
		dst[d] = lag[d] - mean*(2*sy-headSum-tailSum) + float64(m-d)*mean*mean
	}
}

// Reset forgets all sums; units stay known and their storage is kept.
func (s *STA) Reset() {
	s.n = [2]int64{}
	clear(s.sumX[0])
	clear(s.sumX[1])
	clear(s.data)
	for i := range s.stamp {
		s.stamp[i] = -1
	}
	clear(s.sy)
	for h := range s.batchY {
		clear(s.batchY[h])
		s.batchN[h] = 0
	}
	s.rejected = 0
	s.meanN = [2]int64{-1, -1} // the cached means are stale
}
