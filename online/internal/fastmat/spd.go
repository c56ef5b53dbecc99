package fastmat

import (
	"fmt"
	"math"
)

// spdBlock is the block size of the SPD inverse: the inner dimension of the
// rank-nb products (a multiple of both kernels' mr, and at most kc so that
// each product packs Y in one slab).
const spdBlock = 96

// SPDScratch is the scratch space of InvertSPD: two panels of n×96, the
// second one packed for the kernel, and two 96×96 blocks. The zero value is
// ready to use; it grows to the largest n seen and is reused.
type SPDScratch struct {
	panel, panelT []float64 // n×nb and nb×n
	packed        []float64 // panelT packed (packY)
	blk, blkT     []float64 // nb×nb
	trail         trailingJob
}

func (s *SPDScratch) grow(n int) {
	if len(s.panel) < n*spdBlock {
		s.panel = make([]float64, n*spdBlock)
		s.panelT = make([]float64, n*spdBlock)
	}
	if len(s.blk) < spdBlock*spdBlock {
		s.blk = make([]float64, spdBlock*spdBlock)
		s.blkT = make([]float64, spdBlock*spdBlock)
	}
}

// InvertSPD replaces the symmetric positive definite n×n matrix A (row-major,
// stride lda, read from its lower triangle) by its inverse, stored in full
// (both triangles). It works in three blocked passes, each about n³/3 flops
// done almost entirely by the matrix kernel on all workers:
//
//  1. Cholesky A = L·Lᵀ, right-looking: factor a 96-wide diagonal block,
//     solve the panel below it, subtract the panel's rank-96 product from the
//     lower triangle of the trailing matrix;
//  2. Z = L⁻¹, by forward substitution of the identity, one block row at a
//     time, each followed by a rank-96 update of the rows below;
//  3. A⁻¹ = Zᵀ·Z, one block row at a time from the top, in place.
//
// It reports false, leaving A overwritten, when a pivot is not positive (A
// is not positive definite, or not finite). It does not allocate once s has
// grown, and must not be called from a Task.
func InvertSPD(n int, a []float64, lda int, s *SPDScratch) bool {
	if n < 0 || lda < max(n, 1) || (n > 0 && len(a) < (n-1)*lda+n) {
		panic(fmt.Sprintf("fastmat: InvertSPD of n=%d, lda=%d, %d elements", n, lda, len(a)))
	}
	if n == 0 {
		return true
	}
	s.grow(n)
	if !spdCholesky(n, a, lda, s) {
		return false
	}
	spdInvertLower(n, a, lda, s)
	spdGramLower(n, a, lda, s)
	spdMirror(n, a, lda)
	return true
}

// spdCholesky overwrites the lower triangle of A by L with A = L·Lᵀ.
func spdCholesky(n int, a []float64, lda int, s *SPDScratch) bool {
	for k0 := 0; k0 < n; k0 += spdBlock {
		kb := min(spdBlock, n-k0)
		r0, rest := k0+kb, n-k0-kb
		if !cholBlock(a[k0*lda+k0:], lda, kb) {
			return false
		}
		if rest == 0 {
			break
		}
		// Panel: L21 = A21·L11⁻ᵀ, through the explicit inverse of L11.
		li, lit := s.blk[:kb*kb], s.blkT[:kb*kb]
		invLowerBlock(a[k0*lda+k0:], lda, kb, li)
		Transpose(kb, kb, li, kb, lit, kb)
		pan := s.panel[:rest*kb]
		clear(pan)
		MulAdd(rest, kb, kb, 1, a[r0*lda+k0:], lda, lit, kb, pan, kb)
		for i := range rest {
			copy(a[(r0+i)*lda+k0:(r0+i)*lda+r0], pan[i*kb:(i+1)*kb])
		}
		panT := s.panelT[:kb*rest]
		Transpose(rest, kb, pan, kb, panT, rest)
		// Trailing update of the lower triangle: A22 −= L21·L21ᵀ.
		t := &s.trail
		*t = trailingJob{rows: rest, k: kb, x: pan, y: panT, c: a[r0*lda+r0:], ldc: lda}
		if active.fn != nil {
			// Every strip reads the panel's columns from the first on:
			// packed once here rather than once per strip.
			t.packed = packWhole(&s.packed, kb, rest, panT, rest)
		}
		Each(t.pieces(), t)
		*t = trailingJob{}
	}
	return true
}

// trailingJob subtracts X·Y from the lower triangle of C (rows×rows), one
// strip of rows (up to the diagonal) per piece, the longest strips first.
type trailingJob struct {
	rows, k int
	x, y, c []float64 // x rows×k (stride k), y k×rows (stride rows)
	ldc     int
	packed  []float64 // y packed whole (nil: each strip packs its part)
}

const trailingStrip = 48

func (t *trailingJob) pieces() int { return (t.rows + trailingStrip - 1) / trailingStrip }

func (t *trailingJob) Do(i, w int) {
	strip := t.pieces() - 1 - i
	lo := strip * trailingStrip
	hi := min(t.rows, lo+trailingStrip)
	if t.packed != nil {
		pool.bufs[w].mulAddPacked(hi-lo, hi, t.k, -1, t.x[lo*t.k:], t.k, t.packed, t.c[lo*t.ldc:], t.ldc)
		return
	}
	pool.bufs[w].mulAdd(hi-lo, hi, t.k, -1, t.x[lo*t.k:], t.k, false, t.y, t.rows, t.c[lo*t.ldc:], t.ldc)
}

// spdInvertLower overwrites L (lower triangle of A) by Z = L⁻¹, solving
// L·Z = I block row by block row; the upper parts of the diagonal blocks are
// left zero.
func spdInvertLower(n int, a []float64, lda int, s *SPDScratch) {
	for k0 := 0; k0 < n; k0 += spdBlock {
		kb := min(spdBlock, n-k0)
		r0, rest := k0+kb, n-k0-kb
		li := s.blk[:kb*kb]
		invLowerBlock(a[k0*lda+k0:], lda, kb, li)
		// Z[K, 0:k0] = L_KK⁻¹ · B[K, 0:k0], where B is the right-hand side
		// as updated by the block rows above.
		if k0 > 0 {
			zk := s.panelT[:kb*k0]
			clear(zk)
			MulAdd(kb, k0, kb, 1, li, kb, a[k0*lda:], lda, zk, k0)
			for i := range kb {
				copy(a[(k0+i)*lda:(k0+i)*lda+k0], zk[i*k0:(i+1)*k0])
			}
		}
		for i := range kb {
			copy(a[(k0+i)*lda+k0:(k0+i)*lda+r0], li[i*kb:(i+1)*kb])
		}
		if rest == 0 {
			break
		}
		// B[rest, 0:r0] −= L[rest, K] · Z[K, 0:r0]; the identity's block
		// B[rest, K] is zero, so L[rest, K] moves out to the panel first.
		pan := s.panel[:rest*kb]
		for i := range rest {
			row := a[(r0+i)*lda+k0 : (r0+i)*lda+r0]
			copy(pan[i*kb:(i+1)*kb], row)
			clear(row)
		}
		MulAdd(rest, r0, kb, -1, pan, kb, a[k0*lda:], lda, a[r0*lda:], lda)
	}
}

// spdGramLower overwrites Z (lower triangle of A, diagonal blocks with zero
// upper parts) by the lower triangle of Zᵀ·Z. Block row I of the result
// needs only block rows ≥ I of Z, so the rows are done from the top.
func spdGramLower(n int, a []float64, lda int, s *SPDScratch) {
	for k0 := 0; k0 < n; k0 += spdBlock {
		kb := min(spdBlock, n-k0)
		r0, rest := k0+kb, n-k0-kb
		// Row block I ← Z_IIᵀ · Z[I, 0:r0].
		zt := s.blkT[:kb*kb]
		Transpose(kb, kb, a[k0*lda+k0:], lda, zt, kb)
		c := s.panelT[:kb*r0]
		clear(c)
		MulAdd(kb, r0, kb, 1, zt, kb, a[k0*lda:], lda, c, r0)
		for i := range kb {
			copy(a[(k0+i)*lda:(k0+i)*lda+r0], c[i*r0:(i+1)*r0])
		}
		if rest == 0 {
			break
		}
		// Row block I += Z[rest, I]ᵀ · Z[rest, 0:r0].
		zrt := s.panel[:kb*rest]
		Transpose(rest, kb, a[r0*lda+k0:], lda, zrt, rest)
		MulAdd(kb, r0, rest, 1, zrt, rest, a[r0*lda:], lda, a[k0*lda:], lda)
	}
}

// spdMirror copies the lower triangle of A into the upper one.
func spdMirror(n int, a []float64, lda int) {
	for i := range n {
		for j := i + 1; j < n; j++ {
			a[i*lda+j] = a[j*lda+i]
		}
	}
}

// cholBlock overwrites the lower triangle of the kb×kb block at a (stride
// lda) by its Cholesky factor; false when a pivot is not positive.
func cholBlock(a []float64, lda, kb int) bool {
	for j := range kb {
		rj := a[j*lda : j*lda+j+1]
		d := rj[j] - dotGo(rj[:j], rj[:j])
		if !(d > 0) || math.IsInf(d, 0) {
			return false
		}
		ljj := math.Sqrt(d)
		rj[j] = ljj
		for i := j + 1; i < kb; i++ {
			ri := a[i*lda : i*lda+j+1]
			ri[j] = (ri[j] - dotGo(ri[:j], rj[:j])) / ljj
		}
	}
	return true
}

// invLowerBlock writes the inverse of the lower-triangular kb×kb block at l
// (stride ldl) into li (kb×kb, stride kb, zeros above the diagonal).
func invLowerBlock(l []float64, ldl, kb int, li []float64) {
	clear(li[:kb*kb])
	for i := range kb {
		row := li[i*kb : i*kb+i+1]
		for p := range i {
			c := l[i*ldl+p]
			if c == 0 {
				continue
			}
			for j, v := range li[p*kb : p*kb+p+1] {
				row[j] += c * v
			}
		}
		inv := 1 / l[i*ldl+i]
		for j := range i {
			row[j] *= -inv
		}
		row[i] = inv
	}
}

func dotGo(x, y []float64) float64 {
	var s0, s1 float64
	i := 0
	for ; i+2 <= len(x); i += 2 {
		s0 += x[i] * y[i]
		s1 += x[i+1] * y[i+1]
	}
	if i < len(x) {
		s0 += x[i] * y[i]
	}
	return s0 + s1
}
