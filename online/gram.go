package online

import (
	"errors"
	"fmt"
	"math"
	"sync"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/mat"

	"livefield/online/internal/fastmat"
)

// LagGram accumulates, frame by frame, what is needed to form the Gram
// matrix XᵀX of the lagged design exactly, without ever building the design.
//
// For frames s_0…s_{n−1} (P pixels each) and L lags, the used bins are
// k = L−1…n−1 and x_k = [s_k; s_{k−1}; …; s_{k−L+1}]. The (i, j) lag block of
// XᵀX (j ≥ i, τ = j−i) is Q_τ(n−i) − Q_τ(L−1−i) with the lag cross-products
// Q_τ(M) = Σ_{τ≤m<M} s_m s_{m−τ}ᵀ. LagGram keeps Q_τ(n) for every τ < L, the
// frame sums, the first L frames and the last L frames; GramTo adds the exact
// edge terms.
//
// Frames that take only two values (binary noise) are kept as packed bits and
// their cross-products counted with population counts; the first frame with a
// third value converts the counts to floating point and the accumulation
// continues with matrix products on chunks of frames. Both routes give the
// same sums (exactly, for two-level frames whose products are exact in
// float64, such as ±c or {0, 1}).
//
// Pair counts are kept in 32 bits, so a block holds at most 2³² − 1 frames
// (about 2 years at 60 Hz). The pair counts of a full chunk of 1024 frames
// run on a goroutine of its own beside the next frames; every read waits
// for them. A LagGram is not safe for concurrent use.
type LagGram struct {
	pixels, lags, dim int
	n                 int // frames added

	first [][]float64 // first `lags` frames
	ring  [][]float64 // last `lags` frames, frame m at m % lags
	sum   []float64   // Σ_m s_m

	// Two-level route.
	binary   bool
	lo, hi   float64 // the two levels (hi valid when hasHi)
	hasHi    bool
	ones     []int64    // per pixel, frames at level hi
	words    [][]uint64 // per pixel: [carry, chunk words…]
	wordBits int        // frames written into the current chunk
	counts   []uint32   // pixels × dim: counts[p*dim + τ*P + q] = Σ β_m[p] β_{m−τ}[q]
	// A full chunk's pair counts run on a goroutine of its own (counting)
	// while the next chunk's frames come in: shift holds the chunk's words
	// of every pixel at every lag, own its words of every pixel (P × nw),
	// pairs the task; counts, shift and own are touched only after
	// counting.Wait.
	shift     []uint64
	own       []uint64
	pairs     pairCount
	counting  sync.WaitGroup
	countNext func() // counts pairs; made once, so that starting a count does not allocate
	bitChunks int    // words per chunk

	// Floating-point route.
	q     []float64 // pixels × dim: q[p*dim + τ*P + q] = Q_τ(n)[p, q]
	chunk []float64 // (lags−1+denseChunk) × pixels; first lags−1 rows are history
	rows  int       // frames in the chunk after the history rows
	x     []float64 // denseChunk × dim lagged copies of the chunk

	scratch []float64 // pixels × dim, for GramTo

	// Earlier segments (see Restart): their Gram matrix and lagged sums
	// over their used bins, and how many bins they had.
	past     *mat.SymDense
	pastSum  []float64
	pastBins int
}

const (
	// denseChunk frames are gathered before one matrix product per chunk.
	denseChunk = 256
	// bitWords 64-frame words are gathered per pixel before counting.
	bitWords = 16
)

// NewLagGram returns an empty accumulator for frames of `pixels` values and
// `lags` lags (D = pixels·lags).
func NewLagGram(pixels, lags int) (*LagGram, error) {
	if pixels <= 0 || lags <= 0 {
		return nil, fmt.Errorf("online: NewLagGram: pixels %d and lags %d must be positive", pixels, lags)
	}
	if lags > 64 {
		return nil, fmt.Errorf("online: NewLagGram: at most 64 lags, got %d", lags)
	}
	d := pixels * lags
	g := &LagGram{
		pixels:    pixels,
		lags:      lags,
		dim:       d,
		sum:       make([]float64, pixels),
		binary:    true,
		ones:      make([]int64, pixels),
		counts:    make([]uint32, pixels*d),
		bitChunks: bitWords,
	}
	g.first = make([][]float64, lags)
	g.ring = make([][]float64, lags)
	for i := range lags {
		g.first[i] = make([]float64, pixels)
		g.ring[i] = make([]float64, pixels)
	}
	g.words = make([][]uint64, pixels)
	for p := range g.words {
		g.words[p] = make([]uint64, 1+bitWords)
	}
	g.countNext = func() {
		defer g.counting.Done()
		fastmat.Each(g.pairs.pieces, &g.pairs)
	}
	return g, nil
}

// Pixels is the number of values per frame.
func (g *LagGram) Pixels() int { return g.pixels }

// Lags is the number of lags.
func (g *LagGram) Lags() int { return g.lags }

// Dim is the length of one lagged stimulus vector, Pixels·Lags.
func (g *LagGram) Dim() int { return g.dim }

// Frames is the number of frames added.
func (g *LagGram) Frames() int { return g.n }

// Bins is the number of used bins: max(0, Frames − Lags + 1) in the
// current segment, plus those of earlier segments (Restart).
func (g *LagGram) Bins() int { return g.pastBins + g.segmentBins() }

func (g *LagGram) segmentBins() int { return max(0, g.n-g.lags+1) }

// Restart begins a new segment: the next Lags−1 frames are history only,
// as after a pause in the stimulus, and no used bin spans the two
// segments. What the finished segment contributed is kept in a dense D×D
// matrix (made anew at each restart, in O(D²·Pixels), and shared by the
// GramViews taken since).
func (g *LagGram) Restart() {
	if g.segmentBins() > 0 {
		if g.pastSum == nil {
			g.pastSum = make([]float64, g.dim)
		}
		// A new matrix each time, never written afterwards: GramViews
		// share it (View).
		seg := new(mat.SymDense)
		_ = g.segmentGramTo(seg) // cannot fail: the segment has bins
		if g.past != nil {
			seg.AddSym(seg, g.past)
		}
		g.past = seg
		sums := make([]float64, g.dim)
		g.segmentSumsTo(sums)
		for i, v := range sums {
			g.pastSum[i] += v
		}
		g.pastBins += g.segmentBins()
	}
	g.resetSegment()
}

// Reset forgets all frames, of every segment, and keeps the storage.
func (g *LagGram) Reset() {
	g.resetSegment()
	g.past, g.pastSum, g.pastBins = nil, nil, 0
}

// resetSegment forgets the frames of the current segment.
func (g *LagGram) resetSegment() {
	g.counting.Wait()
	g.n = 0
	clear(g.sum)
	g.binary, g.hasHi, g.lo, g.hi = true, false, 0, 0
	clear(g.ones)
	if g.counts == nil { // left the two-level route: rebuild its storage
		g.counts = make([]uint32, g.pixels*g.dim)
		g.words = make([][]uint64, g.pixels)
		for p := range g.words {
			g.words[p] = make([]uint64, 1+g.bitChunks)
		}
	}
	clear(g.counts)
	for _, w := range g.words {
		clear(w)
	}
	g.wordBits = 0
	clear(g.q)
	g.rows = 0
	clear(g.chunk)
}

// frame returns frame m, which must be among the first or the last `lags`.
func (g *LagGram) frame(m int) []float64 {
	if m < g.lags {
		return g.first[m]
	}
	return g.ring[m%g.lags]
}

// AddFrame adds the next frame (len Pixels). The frame is copied. It returns
// an error, and adds nothing, for a wrong length or a non-finite value.
func (g *LagGram) AddFrame(s []float64) error {
	if len(s) != g.pixels {
		return fmt.Errorf("online: LagGram.AddFrame: frame has %d values, want %d", len(s), g.pixels)
	}
	for i, v := range s {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return fmt.Errorf("online: LagGram.AddFrame: value %d is %v", i, v)
		}
	}
	if g.binary && !g.fitsLevels(s) {
		g.toDense()
	}
	if g.binary {
		g.addBits(s)
	} else {
		g.addDense(s)
	}
	if g.n < g.lags {
		copy(g.first[g.n], s)
	}
	copy(g.ring[g.n%g.lags], s)
	for i, v := range s {
		g.sum[i] += v
	}
	g.n++
	return nil
}

// fitsLevels reports whether s takes at most the two levels seen so far,
// fixing the levels on first sight. Once both levels are known the check
// counts matches with conditional moves instead of branching on each value
// (binary noise makes every other branch a misprediction).
func (g *LagGram) fitsLevels(s []float64) bool {
	if g.n == 0 && !g.hasHi {
		g.lo = s[0]
	}
	if g.hasHi {
		lo, hi := g.lo, g.hi
		fits := 0
		for _, v := range s {
			atLo, atHi := 0, 0
			if v == lo {
				atLo = 1
			}
			if v == hi {
				atHi = 1
			}
			fits += atLo | atHi
		}
		return fits == len(s)
	}
	lo, hi, has := g.lo, g.hi, g.hasHi
	for _, v := range s {
		if v == lo || (has && v == hi) {
			continue
		}
		if has {
			return false
		}
		hi, has = v, true
	}
	g.hi, g.hasHi = hi, has
	return true
}

func (g *LagGram) addBits(s []float64) {
	w, b := 1+g.wordBits/64, uint(g.wordBits%64)
	if g.hasHi {
		hi := g.hi
		for p, v := range s {
			var one uint64 // conditional moves, as in fitsLevels
			if v == hi {
				one = 1
			}
			g.words[p][w] |= one << b
			g.ones[p] += int64(one)
		}
	}
	g.wordBits++
	if g.wordBits == 64*g.bitChunks {
		// The chunk's pairs are counted beside the next frames.
		g.counting.Wait()
		g.pairs = g.layChunk(g.counts, g.bitChunks)
		g.counting.Add(1)
		go g.countNext()
		for _, ws := range g.words {
			ws[0] = ws[g.bitChunks]
			clear(ws[1:])
		}
		g.wordBits = 0
	}
}

// countChunk adds to cnt the pair counts of the first nw chunk words, on
// all cores (fastmat.Each), and returns when they are counted.
func (g *LagGram) countChunk(cnt []uint32, nw int) {
	g.counting.Wait()
	task := g.layChunk(cnt, nw)
	fastmat.Each(task.pieces, &task)
}

// layChunk lays out the first nw chunk words for counting and returns the
// task that adds their pair counts to cnt: the words of every pixel
// shifted by every lag as D strings (word w of string τ·P+q at
// shift[w·D + τ·P + q]) and each pixel's own words; pixel p's row of
// counts, cnt[p·D : (p+1)·D], is then one fastmat.AndCount of those strings
// against p's words. The table is g's until the task is done.
func (g *LagGram) layChunk(cnt []uint32, nw int) pairCount {
	P, d, L := g.pixels, g.dim, g.lags
	if need := nw * d; len(g.shift) < need {
		g.shift = make([]uint64, need)
	}
	if need := nw * P; len(g.own) < need {
		g.own = make([]uint64, need)
	}
	sh := g.shift[:nw*d]
	for qq := range P {
		src := g.words[qq]
		copy(g.own[qq*nw:(qq+1)*nw], src[1:1+nw])
		for tau := range L {
			col := tau*P + qq
			for w := 1; w <= nw; w++ {
				// Bit j is frame (chunk start + 64(w−1) + j − τ) of pixel qq.
				sh[(w-1)*d+col] = src[w]<<uint(tau) | src[w-1]>>uint(64-tau)
			}
		}
	}
	// Several pieces per worker balance the load when a core is busy elsewhere.
	return pairCount{g: g, cnt: cnt, nw: nw, pieces: min(P, 4*fastmat.Workers())}
}

// pairCount is a chunk's counting task: piece i counts the pairs of a
// share of the pixels.
type pairCount struct {
	g          *LagGram
	cnt        []uint32
	nw, pieces int
}

func (c *pairCount) Do(i, _ int) {
	g := c.g
	P, d, nw := g.pixels, g.dim, c.nw
	sh := g.shift[:nw*d]
	for p := i * P / c.pieces; p < (i+1)*P/c.pieces; p++ {
		fastmat.AndCount(c.cnt[p*d:(p+1)*d], sh, g.own[p*nw:(p+1)*nw], nw)
	}
}

// betaEdge counts the frames at level hi of pixel p among the first τ
// frames (head) or the last τ frames.
func (g *LagGram) betaEdge(p, tau int, head bool) int64 {
	var c int64
	if head {
		for m := 0; m < min(tau, g.n); m++ {
			if g.hasHi && g.first[m][p] == g.hi {
				c++
			}
		}
		return c
	}
	for m := max(g.n-tau, 0); m < g.n; m++ {
		if g.hasHi && g.frame(m)[p] == g.hi {
			c++
		}
	}
	return c
}

// crossTo writes Q_τ(n) for all τ into dst (pixels × dim).
func (g *LagGram) crossTo(dst []float64) {
	P, d, L := g.pixels, g.dim, g.lags
	if !g.binary {
		copy(dst, g.q)
		if g.rows > 0 {
			g.denseProduct(dst, g.rows)
		}
		return
	}
	// Counts of the partial chunk go into a copy of the running counts.
	g.counting.Wait()
	for i, c := range g.counts {
		dst[i] = float64(c)
	}
	if g.wordBits > 0 {
		nw := (g.wordBits + 63) / 64
		part := make([]uint32, len(g.counts))
		g.countChunk(part, nw)
		for i, c := range part {
			dst[i] += float64(c)
		}
	}
	a := g.lo
	dl := 0.0
	if g.hasHi {
		dl = g.hi - g.lo
	}
	lq := make([]float64, P)
	for tau := range L {
		cnt := float64(max(g.n-tau, 0))
		for qq := range P {
			lq[qq] = 0
			if g.n > tau {
				lq[qq] = float64(g.ones[qq] - g.betaEdge(qq, tau, false))
			}
		}
		for p := range P {
			rp := 0.0
			if g.n > tau {
				rp = float64(g.ones[p] - g.betaEdge(p, tau, true))
			}
			row := dst[p*d+tau*P : p*d+(tau+1)*P]
			for qq, c := range row {
				row[qq] = cnt*a*a + a*dl*(rp+lq[qq]) + dl*dl*c
			}
		}
	}
}

// toDense leaves the two-level route: the counts so far become Q_τ(n) in
// floating point, and the last lags−1 frames become the chunk history.
func (g *LagGram) toDense() {
	P, L := g.pixels, g.lags
	g.q = make([]float64, P*g.dim)
	g.crossTo(g.q)
	g.binary = false
	g.counts, g.words, g.shift, g.own = nil, nil, nil, nil
	g.chunk = make([]float64, (L-1+denseChunk)*P)
	g.x = make([]float64, denseChunk*g.dim)
	for h := 1; h < L; h++ {
		m := g.n - L + h // history row h−1 holds frame n−L+h
		if m >= 0 {
			copy(g.chunk[(h-1)*P:h*P], g.frame(m))
		}
	}
	g.rows = 0
}

func (g *LagGram) addDense(s []float64) {
	P, L := g.pixels, g.lags
	copy(g.chunk[(L-1+g.rows)*P:], s)
	g.rows++
	if g.rows == denseChunk {
		g.denseProduct(g.q, g.rows)
		copy(g.chunk, g.chunk[denseChunk*P:(L-1+denseChunk)*P])
		g.rows = 0
	}
}

// denseProduct adds Σ over the chunk's rows of s_m [s_m; s_{m−1}; …]ᵀ to dst.
func (g *LagGram) denseProduct(dst []float64, rows int) {
	P, L, d := g.pixels, g.lags, g.dim
	for r := range rows {
		xr := g.x[r*d : (r+1)*d]
		for tau := range L {
			src := (L - 1 + r - tau) * P
			copy(xr[tau*P:(tau+1)*P], g.chunk[src:src+P])
		}
	}
	a := blas64.General{Rows: rows, Cols: P, Stride: P, Data: g.chunk[(L-1)*P : (L-1+rows)*P]}
	x := blas64.General{Rows: rows, Cols: d, Stride: d, Data: g.x[:rows*d]}
	q := blas64.General{Rows: P, Cols: d, Stride: d, Data: dst}
	blas64.Gemm(blas.Trans, blas.NoTrans, 1, a, x, 1, q)
}

// ErrFewFrames is returned when fewer frames than lags have been added.
var ErrFewFrames = errors.New("online: fewer frames than lags")

// GramTo writes XᵀX of the lagged design over the used bins into dst, or,
// with centred, X̃ᵀX̃ = XᵀX − N x̄x̄ᵀ (x̄ the mean lagged stimulus, N = Bins).
// An empty dst is sized to Dim; a non-empty dst must have that size.
func (g *LagGram) GramTo(dst *mat.SymDense, centred bool) error {
	if g.Bins() == 0 {
		return ErrFewFrames
	}
	d := g.dim
	if dst.IsEmpty() {
		dst.ReuseAsSym(d)
	} else if dst.SymmetricDim() != d {
		return fmt.Errorf("online: LagGram.GramTo: destination is %d×%d, want %d×%d", dst.SymmetricDim(), dst.SymmetricDim(), d, d)
	}
	if g.segmentBins() > 0 {
		_ = g.segmentGramTo(dst)
		if g.past != nil {
			dst.AddSym(dst, g.past)
		}
	} else {
		dst.CopySym(g.past)
	}
	if centred {
		mean := make([]float64, d)
		g.lagSumsTo(mean)
		nb := float64(g.Bins())
		for i := range mean {
			mean[i] /= nb
		}
		// dst −= N x̄x̄ᵀ on the upper triangle.
		blas64.Syr(-nb, blas64.Vector{N: d, Inc: 1, Data: mean}, dst.RawSymmetric())
	}
	return nil
}

// segmentGramTo writes XᵀX over the current segment's used bins into dst
// (sized to Dim when empty).
func (g *LagGram) segmentGramTo(dst *mat.SymDense) error {
	if g.n < g.lags {
		return ErrFewFrames
	}
	d, P, L := g.dim, g.pixels, g.lags
	if dst.IsEmpty() {
		dst.ReuseAsSym(d)
	}
	if len(g.scratch) != P*d {
		g.scratch = make([]float64, P*d)
	}
	q := g.scratch
	g.crossTo(q)
	// Block row i of the lags on its own core: rows i·P…(i+1)·P−1, the
	// first (longest) rows first.
	fastmat.Each(L, gramRows{g: g, raw: dst.RawSymmetric(), q: q})
	return nil
}

// gramRows writes block row i of the segment's Gram (segmentGramTo) per
// piece.
type gramRows struct {
	g   *LagGram
	raw blas64.Symmetric
	q   []float64
}

func (t gramRows) Do(i, _ int) {
	g, raw, q := t.g, t.raw, t.q
	d, P, L, n := g.dim, g.pixels, g.lags, g.n
	for j := i; j < L; j++ {
		tau := j - i
		for p := range P {
			out := raw.Data[(i*P+p)*raw.Stride+j*P : (i*P+p)*raw.Stride+(j+1)*P]
			copy(out, q[p*d+tau*P:p*d+(tau+1)*P])
			// Minus Σ_{m=n−i}^{n−1} s_m s_{m−τ}ᵀ.
			for m := n - i; m < n; m++ {
				sp := g.frame(m)[p]
				if sp == 0 {
					continue
				}
				axpy(out, -sp, g.frame(m-tau))
			}
			// Minus Q_τ(L−1−i) = Σ_{m=τ}^{L−2−i} s_m s_{m−τ}ᵀ.
			for m := tau; m <= L-2-i; m++ {
				sp := g.frame(m)[p]
				if sp == 0 {
					continue
				}
				axpy(out, -sp, g.frame(m-tau))
			}
		}
	}
}

func axpy(dst []float64, a float64, x []float64) {
	for i, v := range x[:len(dst)] {
		dst[i] += a * v
	}
}

// lagSumsTo writes Σ_k x_k over the used bins (len Dim) into dst.
func (g *LagGram) lagSumsTo(dst []float64) {
	clear(dst)
	if g.segmentBins() > 0 {
		g.segmentSumsTo(dst)
	}
	for i, v := range g.pastSum {
		dst[i] += v
	}
}

// segmentSumsTo writes Σ_k x_k over the current segment's used bins.
func (g *LagGram) segmentSumsTo(dst []float64) {
	P, L, n := g.pixels, g.lags, g.n
	for i := range L {
		out := dst[i*P : (i+1)*P]
		copy(out, g.sum)
		// Bins k = L−1…n−1 use frames m = k−i = L−1−i … n−1−i.
		for m := 0; m < L-1-i; m++ {
			axpy(out, -1, g.frame(m))
		}
		for m := n - i; m < n; m++ {
			axpy(out, -1, g.frame(m))
		}
	}
}

// MeanTo writes the mean lagged stimulus x̄ over the used bins into dst
// (len Dim).
func (g *LagGram) MeanTo(dst []float64) error {
	if len(dst) != g.dim {
		return fmt.Errorf("online: LagGram.MeanTo: destination has %d values, want %d", len(dst), g.dim)
	}
	if g.Bins() == 0 {
		return ErrFewFrames
	}
	g.lagSumsTo(dst)
	nb := float64(g.Bins())
	for i := range dst {
		dst[i] /= nb
	}
	return nil
}

// BatchRidge solves ridge regression with a free (unpenalised) intercept for
// all units at once: for unit u it minimises
// Σ_k (y_uk − b_u − wᵤᵀx_k)² + λ‖wᵤ‖² over the used bins of g.
//
// cross is Dim×U with column u = Σ_k y_uk x_k; ySum[u] = Σ_k y_uk. The
// weights come back as a Dim×U matrix (column u for unit u) and the
// intercepts as a slice. It forms the centred Gram once and solves with one
// Cholesky factorisation: w = (X̃ᵀX̃ + λI)⁻¹ (Σ y x − x̄ Σ y), b = ȳ − x̄ᵀw.
func BatchRidge(g *LagGram, cross mat.Matrix, ySum []float64, lambda float64) (*mat.Dense, []float64, error) {
	if g == nil {
		return nil, nil, errors.New("online: BatchRidge: nil LagGram")
	}
	if !(lambda > 0) || math.IsInf(lambda, 0) {
		return nil, nil, fmt.Errorf("online: BatchRidge: lambda %v must be positive and finite", lambda)
	}
	r, u := cross.Dims()
	if r != g.dim || u != len(ySum) {
		return nil, nil, fmt.Errorf("online: BatchRidge: cross is %d×%d and ySum has %d values, want %d rows and one sum per column", r, u, len(ySum), g.dim)
	}
	var a mat.SymDense
	if err := g.GramTo(&a, true); err != nil {
		return nil, nil, err
	}
	d := g.dim
	for i := range d {
		a.SetSym(i, i, a.At(i, i)+lambda)
	}
	mean := make([]float64, d)
	if err := g.MeanTo(mean); err != nil {
		return nil, nil, err
	}
	rhs := mat.DenseCopyOf(cross)
	rhs.RankOne(rhs, -1, mat.NewVecDense(d, mean), mat.NewVecDense(u, append([]float64(nil), ySum...)))
	var chol mat.Cholesky
	if !chol.Factorize(&a) {
		return nil, nil, errors.New("online: BatchRidge: penalised Gram is not positive definite")
	}
	w := mat.NewDense(d, u, nil)
	if err := chol.SolveTo(w, rhs); err != nil {
		return nil, nil, fmt.Errorf("online: BatchRidge: %w", err)
	}
	nb := float64(g.Bins())
	b := make([]float64, u)
	mv := mat.NewVecDense(d, mean)
	for j := range u {
		b[j] = ySum[j]/nb - mat.Dot(mv, w.ColView(j))
	}
	return w, b, nil
}
