package online

import (
	"math"
	"sync/atomic"

	"livefield/online/internal/fastmat"
)

// cholBlock is the panel width of the blocked Cholesky factorisation.
const cholBlock = 16

// cholesky factors the k×k symmetric positive definite matrix a (row-major;
// the lower triangle is read) in place as a = L·Lᵀ, L in the lower triangle
// (the upper triangle is left as scratch). It is the right-looking blocked
// algorithm (Golub & Van Loan, Matrix Computations, 4th ed., §4.2.9): each
// panel of cholBlock columns is factored with scalar loops and the trailing
// matrix is updated by one product on the package's matrix kernel, on the
// calling goroutine. tr is scratch of at least cholBlock·k values. It
// reports false when a pivot is not positive, and when stop, if not nil,
// turns true before a panel (a itself is then of no use).
func cholesky(a []float64, k int, tr []float64, buf *fastmat.Buf, stop *atomic.Bool) bool {
	var coef [4]float64
	var rows [4][]float64
	for j0 := 0; j0 < k; j0 += cholBlock {
		if stop != nil && stop.Load() {
			return false
		}
		jb := min(cholBlock, k-j0)
		// The diagonal block of the panel (columns j0…j0+jb−1; earlier
		// panels are already subtracted by the trailing updates).
		for j := j0; j < j0+jb; j++ {
			n := j - j0 // columns of the panel left of j
			rj := a[j*k+j0 : j*k+j+1]
			d := rj[n]
			for _, v := range rj[:n] {
				d -= v * v
			}
			if !(d > 0) {
				return false
			}
			rj[n] = math.Sqrt(d)
			for i := j + 1; i < j0+jb; i++ {
				ri := a[i*k+j0 : i*k+j+1]
				x := ri[n]
				for p, v := range ri[:n] {
					x -= v * rj[p]
				}
				ri[n] = x / rj[n]
			}
		}
		r := k - j0 - jb
		if r == 0 {
			break
		}
		// The rows below, L21 = A21·L11⁻ᵀ, solved on the transpose (tr, jb
		// rows of r values) so that each step is a vector operation over
		// all r rows: column n is (A21's column n − Σ_{p<n} L_np·column
		// p) / L_nn.
		s := j0 + jb
		for i := range r {
			row := a[(s+i)*k+j0 : (s+i)*k+j0+jb]
			for p, v := range row {
				tr[p*r+i] = v
			}
		}
		for n := range jb {
			col := tr[n*r : (n+1)*r]
			ln := a[(j0+n)*k+j0 : (j0+n)*k+j0+n+1]
			for p := 0; p < n; p += 4 {
				for q := range 4 {
					coef[q], rows[q] = 0, tr[:r] // past the last: a zero coefficient
					if p+q < n {
						coef[q], rows[q] = -ln[p+q], tr[(p+q)*r:(p+q+1)*r]
					}
				}
				fastmat.AddScaled4(col, &coef, &rows)
			}
			inv := 1 / ln[n]
			for i := range col {
				col[i] *= inv
			}
		}
		for i := range r {
			row := a[(s+i)*k+j0 : (s+i)*k+j0+jb]
			for p := range row {
				row[p] = tr[p*r+i]
			}
		}
		// Trailing update: A22 −= L21·L21ᵀ, L21ᵀ being tr (jb × r). Only
		// the lower triangle is read later, so it is updated in strips of
		// cholStrip rows, each up to its last column: about half the
		// products of the full square.
		for i0 := 0; i0 < r; i0 += cholStrip {
			i1 := min(i0+cholStrip, r)
			buf.MulAdd(i1-i0, i1, jb, -1, a[(s+i0)*k+j0:], k, tr, r, a[(s+i0)*k+s:], k)
		}
	}
	return true
}

// cholStrip is the height of the strips of the trailing update (a multiple
// of the matrix kernel's 12 rows).
const cholStrip = 48

// cholSolve overwrites b with (L·Lᵀ)⁻¹ b for the factor of cholesky.
func cholSolve(l []float64, k int, b []float64) {
	for i := range k {
		s := b[i]
		row := l[i*k : i*k+i]
		for p, v := range row {
			s -= v * b[p]
		}
		b[i] = s / l[i*k+i]
	}
	for i := k - 1; i >= 0; i-- {
		s := b[i] / l[i*k+i]
		b[i] = s
		for p := range i {
			b[p] -= l[i*k+p] * s
		}
	}
}
