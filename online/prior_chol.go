package online

import (
	"math"

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
// reports false when a pivot is not positive.
func cholesky(a []float64, k int, tr []float64, buf *fastmat.Buf) bool {
	for j0 := 0; j0 < k; j0 += cholBlock {
		jb := min(cholBlock, k-j0)
		// The panel: columns j0…j0+jb−1, rows j0…k−1; earlier panels are
		// already subtracted by the trailing updates.
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
			ljj := math.Sqrt(d)
			rj[n] = ljj
			inv := 1 / ljj
			lj := rj[:n]
			for i := j + 1; i < k; i++ {
				ri := a[i*k+j0 : i*k+j+1]
				s := ri[n]
				for p, v := range ri[:n] {
					s -= v * lj[p]
				}
				ri[n] = s * inv
			}
		}
		r := k - j0 - jb
		if r == 0 {
			break
		}
		// Trailing update: A22 −= L21·L21ᵀ, with L21 = rows j0+jb…, columns
		// j0…j0+jb−1, and its transpose copied into tr (jb × r). Only the
		// lower triangle is read later, so it is updated in strips of
		// cholStrip rows, each up to its last column: about half the
		// products of the full square.
		s := j0 + jb
		for p := range jb {
			row := tr[p*r : (p+1)*r]
			for i := range r {
				row[i] = a[(s+i)*k+j0+p]
			}
		}
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
