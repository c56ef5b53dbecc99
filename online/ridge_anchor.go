package online

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/mat"

	"livefield/online/internal/fastmat"
)

// Anchor sets the ridge to the exact solution over rows rows given only
// their sufficient statistics, and re-anchors the recursion on it: rows
// added afterwards fold in by the block update as if every earlier row had
// been added one by one. It is the route for a backlog, where one
// factorisation (about D³ flops) is cheaper than the block update over all
// rows (about 3·D²·B).
//
// gram writes XᵀX of the rows (Dim×Dim, upper triangle) into the matrix it
// is given; sumX is Σ_k x_k (Dim values); cross holds, for each of the Cols()
// columns in turn, Dim()+1 values [Σ_k y_k x_k; Σ_k y_k]; yy holds Σ_k y_k²
// per column. Anchor forms the augmented precision with the intercept's ε
// prior,
//
//	M = [λI + XᵀX, Σx; Σxᵀ, rows + ε],
//
// factors it by Cholesky and inverts it in place in P's storage (blocked, on
// the matrix kernel: fastmat.InvertSPD, about 8× faster than gonum's
// Potrf+Potri at D = 3072 in BenchmarkInvertSPD),
// then sets W = P·AᵀY and each column's objective yᵀy − (AᵀY)ᵀW, exactly
// the state the recursion would have reached. Pending rows are dropped (the
// statistics must include them). On error the ridge is left empty (Reset)
// and the error is also reported by Err.
func (r *Ridge) Anchor(rows int64, gram func(dst *mat.SymDense) error, sumX, cross, yy []float64) error {
	fail := func(err error) error {
		r.Reset()
		r.fail(err)
		return err
	}
	d, n, ld := r.dim, r.n, r.ld
	switch {
	case rows < 0:
		return fail(fmt.Errorf("online: ridge Anchor: %d rows", rows))
	case len(sumX) != d || len(cross) != r.cols*n || len(yy) != r.cols:
		return fail(fmt.Errorf("online: ridge Anchor: %d sums, %d cross values and %d squares; want %d, %d and %d",
			len(sumX), len(cross), len(yy), d, r.cols*n, r.cols))
	}
	r.dropPending()
	clear(r.p)
	// The Gram goes straight into P's storage (stride ld, upper triangle).
	var g mat.SymDense
	g.SetRawSymmetric(blas64.Symmetric{Uplo: blas.Upper, N: d, Stride: ld, Data: r.p[:(d-1)*ld+d]})
	if err := gram(&g); err != nil {
		return fail(fmt.Errorf("online: ridge Anchor: %w", err))
	}
	if g.SymmetricDim() != d {
		return fail(fmt.Errorf("online: ridge Anchor: Gram of size %d, want %d", g.SymmetricDim(), d))
	}
	for i := range d {
		r.p[i*ld+i] += r.lam
		r.p[i*ld+d] = sumX[i]
	}
	r.p[d*ld+d] = float64(rows) + r.eps
	for i := range n {
		for _, v := range r.p[i*ld+i : i*ld+n] {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return fail(errors.New("online: ridge Anchor: statistics not finite"))
			}
		}
	}
	// The blocked inverse reads the lower triangle and writes P in full.
	r.job.phase = phaseMirror
	fastmat.Each(r.nt, &r.job)
	var scratch fastmat.SPDScratch
	if !fastmat.InvertSPD(n, r.p, ld, &scratch) {
		return fail(errors.New("online: ridge Anchor: penalised Gram is not positive definite"))
	}

	// Wᵀ = (AᵀY)ᵀ P, column by column of the responses; J = yᵀy − (AᵀY)ᵀW.
	// Columns whose AᵀY is zero (room for units yet to come, and those
	// after them) have W = 0 and J = yᵀy: the product skips them.
	live := r.cols
	for live > 0 && allZero(cross[(live-1)*n:live*n]) {
		live--
	}
	clear(r.wt)
	copy(r.obj, yy[:r.cols])
	if live > 0 {
		// cross holds the columns' AᵀY as rows of n values: it is X of
		// the product, read in place, against the first n rows of P.
		fastmat.MulAdd(live, ld, n, 1, cross, n, r.p, ld, r.wt, ld)
		for c := range live {
			r.obj[c] = yy[c] - dot(cross[c*n:(c+1)*n], r.wt[c*ld:c*ld+n])
		}
	}
	r.rows = rows
	return nil
}

// mirrorRows copies the upper triangle of rows of tile t of P into the
// lower triangle.
func (r *Ridge) mirrorRows(t int) {
	lo, sz := r.tile(t)
	ld := r.ld
	for j := lo; j < lo+sz; j++ {
		for i := j + 1; i < ld; i++ {
			r.p[i*ld+j] = r.p[j*ld+i]
		}
	}
}

// allZero reports whether every value of v is zero.
func allZero(v []float64) bool {
	for _, x := range v {
		if x != 0 {
			return false
		}
	}
	return true
}
