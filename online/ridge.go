package online

import (
	"errors"
	"fmt"
	"math"

	"livefield/online/internal/fastmat"
)

// Ridge keeps the exact ridge regression of many response columns on one
// shared stream of stimulus rows, with a free (unpenalised) intercept:
//
//	min over b, w of  Σ_k (y_k − b − x_k·w)² + λ‖w‖²   for every column.
//
// It is recursive least squares on the augmented rows a_k = [x_k; 1]: the
// inverse information P = (Λ + Σ a_k a_kᵀ)⁻¹ and the gain are shared by all
// columns, each column only keeps its weights and its penalised residual sum.
// Rows are buffered by AddRow and folded in by one block (Woodbury) update
// per Flush (Haykin, Adaptive Filter Theory, RLS chapter):
//
//	S = I + A P Aᵀ = L Lᵀ,  U = P Aᵀ L⁻ᵀ,  E = Y − A W,
//	W ← W + U L⁻¹ E,  P ← P − U Uᵀ,  J ← J + ‖L⁻¹E‖² per column.
//
// Λ = diag(λ,…,λ, 0) is singular, so the recursion runs with a prior
// precision ε on the intercept and Objective, WeightsTo, PosteriorDiagTo and
// HatTraces remove it exactly when they read (Sherman–Morrison):
// (M)⁻¹ = P_ε + ε P_ε e eᵀ P_ε / (1 − ε eᵀ P_ε e), e the intercept axis.
//
// The result does not depend on how rows are grouped into Flushes, and
// Anchor sets the state from the rows' sufficient statistics instead.
//
// P is kept in the lower triangle only (tiles of tileSize, diagonal tiles
// in full); the products run on all cores through fastmat. AddRow and Flush
// do not allocate once the row buffer has grown to the largest block.
//
// A Ridge is not safe for concurrent use: one goroutine calls every method.
type Ridge struct {
	dim, cols int
	n, ld     int     // augmented size dim+1, and the padded stride (multiple of 12)
	nt        int     // tiles per side of P
	diag      diagJob // samplingDiagTraces' lanes and their scratch
	lambda    float64
	lam, eps  float64 // the penalty and the intercept's prior precision ε
	rows      int64

	p   []float64 // ld×ld; lower-triangle tiles current, diagonal tiles in full
	wt  []float64 // colCap×ld; row u holds [w_u; b_u] of the ε-prior problem
	obj []float64 // per column, the minimised objective of the ε-prior problem

	// Row buffer: pending rows of A (stride ld) and Y (stride colCap).
	a, y    []float64
	pending int
	rowCap  int
	colCap  int

	// Flush scratch, sized for rowCap rows (bp = pending rounded up to 12).
	at, vt, ut     []float64 // ld×rowCap or rowCap×ld
	s, linv, linvT []float64 // rowCap²
	et, ft         []float64 // colCap×rowCap

	bufs    []fastmat.Buf
	job     ridgeJob
	wv      [][]float64 // per-lane parts of V for the V pass
	hatDiag []float64   // HatTraces' scratch for the sampling diagonal

	err      error
	rejected int64
}

// tileSize is the side of the tiles of P (a multiple of both kernels' register
// blocks, 4×12 and 12×16); 240 keeps a tile (450 KiB) inside one core's L2 cache.
const tileSize = 240

// maxRidgeDim bounds Dim so that P (8·(Dim+1)² bytes) stays near 2 GB.
const maxRidgeDim = 16000

// interceptPrior is ε, the prior precision given to the intercept during the
// recursion, on the scale of one row of data; its effect is removed exactly
// on reading, so it only affects round-off.
const interceptPrior = 1.0

// NewRidge returns an empty ridge for rows of dim stimulus values and cols
// response columns, with penalty lambda > 0.
func NewRidge(dim, cols int, lambda float64) (*Ridge, error) {
	switch {
	case dim <= 0:
		return nil, fmt.Errorf("online: ridge dimension %d, want > 0", dim)
	case cols < 0:
		return nil, fmt.Errorf("online: ridge columns %d, want >= 0", cols)
	case !(lambda > 0) || math.IsInf(lambda, 1):
		return nil, fmt.Errorf("online: ridge penalty %v, want finite and > 0", lambda)
	}
	if dim > maxRidgeDim {
		return nil, fmt.Errorf("online: ridge dimension %d, at most %d (P alone would need %d MB)", dim, maxRidgeDim, 8*(dim+1)*(dim+1)>>20)
	}
	n := dim + 1
	ld := (n + 11) / 12 * 12
	r := &Ridge{
		dim: dim, cols: cols, n: n, ld: ld,
		nt:     (ld + tileSize - 1) / tileSize,
		lambda: lambda,
		p:      make([]float64, ld*ld),
	}
	r.job.r = r
	r.bufs = make([]fastmat.Buf, fastmat.Workers())
	r.wv = make([][]float64, len(r.bufs))
	r.growCols(cols)
	r.Reset()
	return r, nil
}

// Dim is the number of stimulus values per row (without the intercept).
func (r *Ridge) Dim() int { return r.dim }

// Cols is the number of response columns.
func (r *Ridge) Cols() int { return r.cols }

// Lambda is the penalty given to NewRidge.
func (r *Ridge) Lambda() float64 { return r.lambda }

// Rows is the number of rows folded in so far.
func (r *Ridge) Rows() int64 { return r.rows }

// Pending is the number of rows buffered and not yet folded in.
func (r *Ridge) Pending() int { return r.pending }

// Rejected is the number of rows AddRow refused.
func (r *Ridge) Rejected() int64 { return r.rejected }

// Err returns the first misuse seen (a refused row, a column out of range,
// a destination of the wrong length), or nil.
func (r *Ridge) Err() error { return r.err }

func (r *Ridge) fail(err error) {
	if r.err == nil {
		r.err = err
	}
}

// ErrRidgeRow is wrapped by the errors for rows that AddRow refuses.
var ErrRidgeRow = errors.New("online: ridge row refused")

// AddRow buffers one row: x holds Dim() stimulus values, y holds Cols()
// responses. Both are copied. A row of the wrong length or with a value that
// is not finite is refused (counted by Rejected, reported by Err). It does
// not allocate once the buffer has grown to the largest block.
func (r *Ridge) AddRow(x, y []float64) {
	if len(x) != r.dim || len(y) != r.cols {
		r.rejected++
		r.fail(fmt.Errorf("%w: lengths %d and %d, want %d and %d", ErrRidgeRow, len(x), len(y), r.dim, r.cols))
		return
	}
	for _, v := range x {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			r.rejected++
			r.fail(fmt.Errorf("%w: stimulus value %v", ErrRidgeRow, v))
			return
		}
	}
	for _, v := range y {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			r.rejected++
			r.fail(fmt.Errorf("%w: response value %v", ErrRidgeRow, v))
			return
		}
	}
	if r.pending+1 > r.rowCap {
		r.growRows(max(2*r.rowCap, 60))
	}
	k := r.pending
	copy(r.a[k*r.ld:k*r.ld+r.dim], x)
	r.a[k*r.ld+r.dim] = 1
	copy(r.y[k*r.colCap:k*r.colCap+r.cols], y)
	r.pending++
}

// growRows sizes the row buffer and the Flush scratch for at least rows rows
// (rounded up to the kernel's 12-wide blocks), keeping the pending rows.
func (r *Ridge) growRows(rows int) {
	rows = (rows + 11) / 12 * 12
	if rows <= r.rowCap {
		return
	}
	a := make([]float64, rows*r.ld)
	copy(a, r.a[:r.pending*r.ld])
	y := make([]float64, rows*r.colCap)
	copy(y, r.y[:r.pending*r.colCap])
	r.a, r.y, r.rowCap = a, y, rows
	r.at = make([]float64, r.ld*rows)
	r.vt = make([]float64, rows*r.ld)
	r.ut = make([]float64, rows*r.ld)
	r.s = make([]float64, rows*rows)
	r.linv = make([]float64, rows*rows)
	r.linvT = make([]float64, rows*rows)
	r.et = make([]float64, r.colCap*rows)
	r.ft = make([]float64, r.colCap*rows)
	for w := range r.wv {
		r.wv[w] = make([]float64, r.ld*rows)
	}
}

// SetCols grows the number of response columns to n. A new column starts
// with the exact solution for a response that was 0 in every past row; rows
// still pending get 0 in the new columns. Shrinking is refused (Err).
func (r *Ridge) SetCols(n int) {
	if n < r.cols {
		r.fail(fmt.Errorf("online: ridge SetCols(%d) below %d columns", n, r.cols))
		return
	}
	r.growCols(n)
	r.cols = n
}

func (r *Ridge) growCols(n int) {
	if n > r.colCap {
		c := max(n, 2*r.colCap)
		wt := make([]float64, c*r.ld)
		copy(wt, r.wt)
		obj := make([]float64, c)
		copy(obj, r.obj)
		y := make([]float64, r.rowCap*c)
		for k := range r.pending {
			copy(y[k*c:k*c+r.cols], r.y[k*r.colCap:k*r.colCap+r.cols])
		}
		r.wt, r.obj, r.y, r.colCap = wt, obj, y, c
		r.et = make([]float64, c*r.rowCap)
		r.ft = make([]float64, c*r.rowCap)
	}
}

// Reset forgets every row, folded in or pending; the columns stay.
func (r *Ridge) Reset() {
	clear(r.p)
	for i := range r.dim {
		r.p[i*r.ld+i] = 1 / r.lambda
	}
	r.p[r.dim*r.ld+r.dim] = 1 / interceptPrior
	clear(r.wt)
	clear(r.obj)
	clear(r.a)
	clear(r.y)
	r.pending, r.rows = 0, 0
	r.lam, r.eps = r.lambda, interceptPrior
}

// tile returns the first index and the size of tile t along one side of P.
func (r *Ridge) tile(t int) (lo, size int) {
	lo = t * tileSize
	return lo, min(tileSize, r.ld-lo)
}

// Flush folds the buffered rows in with one block update, on all cores.
// It does not allocate.
func (r *Ridge) Flush() {
	B := r.pending
	if B == 0 {
		return
	}
	bp := (B + 11) / 12 * 12 // padding rows are zero in A and Y: they change nothing
	ld, cols := r.ld, r.cols

	// At = Aᵀ (ld×bp); Yt = Yᵀ goes straight into et (cols×bp).
	r.job.phase, r.job.bp = phaseTranspose, bp
	fastmat.Each(r.nt+(cols+tileSize-1)/tileSize, &r.job)
	at, et := r.at[:ld*bp], r.et[:cols*bp]

	// V = P Aᵀ from the lower triangle, one tile at a time while it is in
	// cache: P_IJ At_J goes to rows I of V and, below the diagonal,
	// P_IJᵀ At_I (P_JI At_I, by symmetry) to rows J. Each lane (one per
	// worker) accumulates a fixed set of tiles, in a fixed order, into its
	// own V; the lanes are summed into Vt afterwards, lane by lane. The sums
	// therefore do not depend on which worker took which piece: the result
	// is the same bit for bit from run to run.
	vt := r.vt[:bp*ld]
	for w := range r.wv {
		clear(r.wv[w][:ld*bp])
	}
	r.job.phase = phaseV
	fastmat.Each(len(r.wv), &r.job)
	r.job.phase = phaseVSum
	fastmat.Each((ld+tileSize-1)/tileSize, &r.job)

	// S = I + A P Aᵀ = L Lᵀ; keep L⁻¹ and L⁻ᵀ.
	s := r.s[:bp*bp]
	clear(s)
	fastmat.MulAdd(bp, bp, ld, 1, vt, ld, at, bp, s, bp)
	for k := range bp {
		s[k*bp+k]++
	}
	if !ridgeCholInv(s, r.linv[:bp*bp], r.linvT[:bp*bp], bp) {
		// S ≥ I in exact arithmetic; this is round-off gone wild.
		r.fail(errors.New("online: ridge update lost definiteness; rows dropped"))
		r.dropPending()
		return
	}
	linv, linvT := r.linv[:bp*bp], r.linvT[:bp*bp]

	// Ut = L⁻¹ Vt (bp×ld).
	ut := r.ut[:bp*ld]
	clear(ut)
	fastmat.MulAdd(bp, ld, bp, 1, linv, bp, vt, ld, ut, ld)

	if cols > 0 {
		// Et = Yt − Wt At, Ft = Et L⁻ᵀ, J += ‖Ft row‖², Wt += Ft Ut.
		fastmat.MulAdd(cols, bp, ld, -1, r.wt, ld, at, bp, et, bp)
		ft := r.ft[:cols*bp]
		clear(ft)
		fastmat.MulAdd(cols, bp, bp, 1, et, bp, linvT, bp, ft, bp)
		for c := range cols {
			var q float64
			for _, x := range ft[c*bp : c*bp+bp] {
				q += x * x
			}
			r.obj[c] += q
		}
		fastmat.MulAdd(cols, ld, bp, 1, ft, bp, ut, ld, r.wt, ld)
	}

	// P −= U Uᵀ (U = Utᵀ) on the lower-triangle tiles.
	r.job.phase = phaseP
	fastmat.Each(r.nt*(r.nt+1)/2, &r.job)

	r.rows += int64(B)
	r.dropPending()
}

// dropPending clears the row buffer.
func (r *Ridge) dropPending() {
	clear(r.a[:r.pending*r.ld])
	clear(r.y[:r.pending*r.colCap])
	r.pending = 0
}

// ridgeCholInv factors the symmetric positive definite n×n matrix s (lower
// triangle read) as L Lᵀ and writes L⁻¹ to linv and L⁻ᵀ to linvT (both
// row-major, zeros outside the triangle). It reports false if s is not
// numerically positive definite.
func ridgeCholInv(s, linv, linvT []float64, n int) bool {
	// In place: the lower triangle of s becomes L.
	for j := range n {
		d := s[j*n+j]
		for k := range j {
			d -= s[j*n+k] * s[j*n+k]
		}
		if !(d > 0) {
			return false
		}
		d = math.Sqrt(d)
		s[j*n+j] = d
		for i := j + 1; i < n; i++ {
			x := s[i*n+j]
			for k := range j {
				x -= s[i*n+k] * s[j*n+k]
			}
			s[i*n+j] = x / d
		}
	}
	// L⁻¹ by forward substitution on the columns of I.
	clear(linv)
	for i := range n {
		linv[i*n+i] = 1 / s[i*n+i]
		for j := range i {
			var x float64
			for k := j; k < i; k++ {
				x += s[i*n+k] * linv[k*n+j]
			}
			linv[i*n+j] = -x / s[i*n+i]
		}
	}
	for i := range n {
		for j := range n {
			linvT[j*n+i] = linv[i*n+j]
		}
	}
	return true
}

// The parallel phases of Flush and of mirroring P.
const (
	phaseTranspose = iota
	phaseV
	phaseVSum
	phaseP
	phaseMirror
)

// ridgeJob hands the tile work of one phase to fastmat.Each.
type ridgeJob struct {
	r     *Ridge
	phase int
	bp    int
}

func (j *ridgeJob) Do(i, w int) {
	r, bp, ld := j.r, j.bp, j.r.ld
	buf := &r.bufs[w]
	switch j.phase {
	case phaseV:
		// Lane i: tiles i, i + lanes, i + 2·lanes, …
		lanes, tiles := len(r.wv), r.nt*(r.nt+1)/2
		for t := i; t < tiles; t += lanes {
			I, J := ridgeTileOf(t)
			i0, mi := r.tile(I)
			j0, mj := r.tile(J)
			pt := r.p[i0*ld+j0:]
			buf.MulAdd(mi, bp, mj, 1, pt, ld, r.at[j0*bp:], bp, r.wv[i][i0*bp:], bp)
			if I != J {
				buf.MulAddT(mj, bp, mi, 1, pt, ld, r.at[i0*bp:], bp, r.wv[i][j0*bp:], bp)
			}
		}
	case phaseVSum:
		// Columns [lo, hi) of Vt: the sum of the lanes' parts, lane by lane.
		lo, sz := r.tile(i)
		vt := r.vt[:bp*ld]
		for k := range bp {
			clear(vt[k*ld+lo : k*ld+lo+sz])
		}
		for w := range r.wv {
			wv := r.wv[w]
			for c := lo; c < lo+sz; c++ {
				for k, x := range wv[c*bp : c*bp+bp] {
					vt[k*ld+c] += x
				}
			}
		}
	case phaseTranspose:
		// Pieces 0…nt−1: columns of A into rows of At; then blocks of
		// columns of Y into rows of Yt (in et).
		if i < r.nt {
			lo, sz := r.tile(i)
			fastmat.Transpose(bp, sz, r.a[lo:], ld, r.at[lo*bp:], bp)
			return
		}
		lo := (i - r.nt) * tileSize
		fastmat.Transpose(bp, min(tileSize, r.cols-lo), r.y[lo:], r.colCap, r.et[lo*bp:], bp)
	case phaseP:
		// P_IJ −= U_I Ut_J.
		I, J := ridgeTileOf(i)
		i0, mi := r.tile(I)
		j0, mj := r.tile(J)
		buf.MulAddT(mi, mj, bp, -1, r.ut[i0:], ld, r.ut[j0:], ld, r.p[i0*ld+j0:], ld)
	case phaseMirror:
		r.mirrorRows(i)
	}
}

// ridgeTileOf returns tile (I, J), J ≤ I, of the lower triangle numbered
// row by row: 0 = (0,0), 1 = (1,0), 2 = (1,1), 3 = (2,0), …
func ridgeTileOf(i int) (I, J int) {
	I = int((math.Sqrt(8*float64(i)+1) - 1) / 2)
	for I*(I+1)/2 > i {
		I--
	}
	for (I+1)*(I+2)/2 <= i {
		I++
	}
	return I, i - I*(I+1)/2
}

// interceptCorrection returns c = ε/(1 − ε P_ee) and the column P_e (the last
// row of the stored triangle) that turn the ε-prior state into the exact one:
// M⁻¹ = P + c P_e P_eᵀ. With no rows the intercept is undefined and c = 0.
func (r *Ridge) interceptCorrection() (c float64, pe []float64) {
	pe = r.p[r.dim*r.ld : r.dim*r.ld+r.n]
	if r.rows == 0 {
		return 0, pe
	}
	return r.eps / (1 - r.eps*pe[r.dim]), pe
}

// WeightsTo writes the ridge weights of column col (Dim() values, lag-major
// as the rows were given) to dst and returns the intercept: the exact
// solution over all folded rows. A wrong col or length of dst writes NaN and
// is reported by Err.
func (r *Ridge) WeightsTo(dst []float64, col int) (intercept float64) {
	if col < 0 || col >= r.cols || len(dst) != r.dim {
		r.fail(fmt.Errorf("online: ridge WeightsTo column %d of %d, dst length %d of %d", col, r.cols, len(dst), r.dim))
		for i := range dst {
			dst[i] = math.NaN()
		}
		return math.NaN()
	}
	w, pe, f := r.weightsRow(col)
	for i := range dst {
		dst[i] = w[i] + f*pe[i]
	}
	return w[r.dim] + f*pe[r.dim]
}

// Objective is the minimised penalised sum of squares of column col,
// RSS + λ‖w‖²; NaN for a column out of range.
func (r *Ridge) Objective(col int) float64 {
	if col < 0 || col >= r.cols {
		r.fail(fmt.Errorf("online: ridge Objective column %d of %d", col, r.cols))
		return math.NaN()
	}
	c, _ := r.interceptCorrection()
	b := r.wt[col*r.ld+r.dim]
	return max(0, r.obj[col]-c*b*b)
}

// PosteriorDiagTo writes the diagonal of the weights block of
// (Λ + ÃᵀÃ)⁻¹, Ã = [X 1], to dst (Dim() values); times the noise variance
// σ² it is the posterior variance of each weight. With no rows it is 1/λ.
func (r *Ridge) PosteriorDiagTo(dst []float64) {
	if len(dst) != r.dim {
		r.fail(fmt.Errorf("online: ridge PosteriorDiagTo dst length %d, want %d", len(dst), r.dim))
		for i := range dst {
			dst[i] = math.NaN()
		}
		return
	}
	c, pe := r.interceptCorrection()
	for i := range dst {
		dst[i] = r.p[i*r.ld+i] + c*pe[i]*pe[i]
	}
}

// HatTraces returns tr(H) and tr(H²) of the ridge hat matrix of the weights,
// Σ h_i and Σ h_i² with h_i = g_i/(g_i+λ) over the eigenvalues g_i of the
// centred Gram matrix, from Q = the weights block of (Λ + ÃᵀÃ)⁻¹:
// t1 = D − λ tr Q, t2 = D − 2λ tr Q + λ²‖Q‖_F². They come from the pass
// that gives the sampling diagonal (samplingDiagTraces), one pass over P on
// all cores; an Update takes both from it at once.
func (r *Ridge) HatTraces() (t1, t2 float64) {
	if len(r.hatDiag) != r.dim {
		r.hatDiag = make([]float64, r.dim)
	}
	return r.samplingDiagTraces(r.hatDiag)
}
