package fastmat

import "fmt"

// microKernel adds alpha times an mr×nr block of X·Y to C: x points at mr
// rows of X, element (i, p) at x + i·rs + p·ks (k values each), y at a
// packed panel (k rows of nr contiguous values). k must be positive.
type microKernel struct {
	name   string
	mr, nr int
	fn     func(k int, x *float64, rs, ks int, y *float64, c *float64, ldc int, alpha float64)
}

// active is the kernel in use: the fastest one this CPU runs, or none (the
// pure-Go path).
var active = func() microKernel {
	if len(kernels) > 0 {
		return kernels[0]
	}
	return microKernel{name: "go"}
}()

// Cache blocks: a packed slab of Y is kc×nc (kc·nc·8 bytes = 576 KiB, inside
// the L2 cache of one core) and is reused for every row block of X.
const (
	kc = 256
	nc = 288 // a multiple of every kernel's nr
)

// Buf is the scratch space of one goroutine: the packed slab of Y and the
// zero-padded edge blocks. The zero value is ready to use; it grows once to
// a fixed size and is reused by every call.
type Buf struct {
	pack  []float64
	xedge []float64
	cedge []float64
}

// grow sizes the buffer at first use.
func (b *Buf) grow() {
	if len(b.pack) < kc*nc {
		b.pack = make([]float64, kc*nc)
		b.xedge = make([]float64, 16*kc)
		b.cedge = make([]float64, 16*nc)
	}
}

// MulAdd computes C += alpha·X·Y on the calling goroutine, where X is m×k,
// Y is k×n and C is m×n, all row-major with strides ldx, ldy and ldc.
func (b *Buf) MulAdd(m, n, k int, alpha float64, x []float64, ldx int, y []float64, ldy int, c []float64, ldc int) {
	check(m, n, k, x, ldx, y, ldy, c, ldc)
	if m == 0 || n == 0 || k == 0 || alpha == 0 {
		return
	}
	b.mulAdd(m, n, k, alpha, x, ldx, false, y, ldy, c, ldc)
}

// MulAddT computes C += alpha·Xᵀ·Y on the calling goroutine, where X is k×m
// (so Xᵀ is m×k), Y is k×n and C is m×n, all row-major with strides ldx,
// ldy and ldc. X is read in place: the kernels walk its columns, so the
// transpose is never formed.
func (b *Buf) MulAddT(m, n, k int, alpha float64, x []float64, ldx int, y []float64, ldy int, c []float64, ldc int) {
	// Xᵀ·Y has the shapes of op(X)·Y; only X's layout (k×m) differs.
	check(m, n, k, nil, max(k, 1), y, ldy, c, ldc)
	switch {
	case ldx < max(m, 1):
		panic(fmt.Sprintf("fastmat: stride too small: ldx=%d (X is k×m, m=%d)", ldx, m))
	case m > 0 && k > 0 && len(x) < (k-1)*ldx+m:
		panic(fmt.Sprintf("fastmat: x has %d elements, needs %d", len(x), (k-1)*ldx+m))
	}
	if m == 0 || n == 0 || k == 0 || alpha == 0 {
		return
	}
	b.mulAdd(m, n, k, alpha, x, ldx, true, y, ldy, c, ldc)
}

// mulAdd is C += alpha·op(X)·Y with op(X) = X (m×k, stride ldx) or, when
// transposed, Xᵀ with X k×m.
func (b *Buf) mulAdd(m, n, k int, alpha float64, x []float64, ldx int, transposed bool, y []float64, ldy int, c []float64, ldc int) {
	// Element (i, p) of op(X) is x[i·rs + p·ks].
	rs, ks := ldx, 1
	if transposed {
		rs, ks = 1, ldx
	}
	kn := active
	if kn.fn == nil {
		goMulAdd(m, n, k, alpha, x, rs, ks, y, ldy, c, ldc)
		return
	}
	nr := kn.nr
	b.grow()
	for j0 := 0; j0 < n; j0 += nc {
		nb := min(nc, n-j0)
		for p0 := 0; p0 < k; p0 += kc {
			kb := min(kc, k-p0)
			packY(b.pack, kb, nb, nr, y[p0*ldy+j0:], ldy)
			b.slab(kn, m, nb, kb, alpha, x[p0*ks:], rs, ks, transposed, ldx, b.pack, c[j0:], ldc)
		}
	}
}

// mulAddPacked is C += alpha·X·Y for Y packed whole by packY (k ≤ kc rows,
// ⌈n/nr⌉ panels of nr columns for the active kernel): the pieces of a
// product that share Y pack it once between them.
func (b *Buf) mulAddPacked(m, n, k int, alpha float64, x []float64, ldx int, packed []float64, c []float64, ldc int) {
	kn := active
	b.grow()
	for j0 := 0; j0 < n; j0 += nc {
		nb := min(nc, n-j0)
		b.slab(kn, m, nb, k, alpha, x, ldx, 1, false, ldx, packed[j0*k:], c[j0:], ldc)
	}
}

// slab adds alpha·op(X)·Y for one packed slab of Y (kb×nb, panels of nr at
// pack) to the nb columns of C at c: op(X)'s element (i, p) at
// x[i·rs + p·ks], its rows taken mr at a time.
func (b *Buf) slab(kn microKernel, m, nb, kb int, alpha float64, x []float64, rs, ks int, transposed bool, ldx int, pack []float64, c []float64, ldc int) {
	mr, nr := kn.mr, kn.nr
	for i0 := 0; i0 < m; i0 += mr {
		rows := min(mr, m-i0)
		xp, rsp, ksp := x[i0*rs:], rs, ks
		if rows < mr {
			// Copy the last rows of op(X) into a zero-padded block.
			xp, rsp, ksp = b.xedge[:mr*kb], kb, 1
			clear(xp)
			for i := range rows {
				row := xp[i*kb : i*kb+kb]
				if transposed {
					for p := range row {
						row[p] = x[p*ldx+i0+i]
					}
				} else {
					copy(row, x[(i0+i)*ldx:])
				}
			}
		}
		ci := c[i0*ldc:]
		for jp := 0; jp < nb; jp += nr {
			cols := min(nr, nb-jp)
			panel := &pack[jp*kb]
			if rows == mr && cols == nr {
				kn.fn(kb, &xp[0], rsp, ksp, panel, &ci[jp], ldc, alpha)
				continue
			}
			// Edge block: compute into scratch, add the part that exists.
			ce := b.cedge[:mr*nr]
			clear(ce)
			kn.fn(kb, &xp[0], rsp, ksp, panel, &ce[0], nr, alpha)
			for i := range rows {
				dst := ci[i*ldc+jp : i*ldc+jp+cols]
				for j, v := range ce[i*nr : i*nr+cols] {
					dst[j] += v
				}
			}
		}
	}
}

// packY copies the kb×nb block of y into dst as ⌈nb/nr⌉ consecutive panels,
// each kb rows of nr contiguous values; the last panel is padded with zeros.
func packY(dst []float64, kb, nb, nr int, y []float64, ldy int) {
	full := nb - nb%nr
	for p := 0; p < kb; p++ {
		row := y[p*ldy : p*ldy+nb]
		for jp := 0; jp < full; jp += nr {
			copy(dst[jp*kb+p*nr:jp*kb+p*nr+nr], row[jp:jp+nr])
		}
		if full < nb {
			d := dst[full*kb+p*nr : full*kb+p*nr+nr]
			n := copy(d, row[full:])
			clear(d[n:])
		}
	}
}

// goMulAdd is the pure-Go path: C += alpha·X·Y one row of C at a time,
// element (i, p) of X at x[i·rs + p·ks] (see the kernels).
func goMulAdd(m, n, k int, alpha float64, x []float64, rs, ks int, y []float64, ldy int, c []float64, ldc int) {
	for i := 0; i < m; i++ {
		ci := c[i*ldc : i*ldc+n]
		for p := range k {
			a := alpha * x[i*rs+p*ks]
			if a == 0 {
				continue
			}
			yp := y[p*ldy : p*ldy+n]
			j := 0
			for ; j+4 <= n; j += 4 {
				ci[j] += a * yp[j]
				ci[j+1] += a * yp[j+1]
				ci[j+2] += a * yp[j+2]
				ci[j+3] += a * yp[j+3]
			}
			for ; j < n; j++ {
				ci[j] += a * yp[j]
			}
		}
	}
}

// check panics on operands that cannot hold the stated sizes.
func check(m, n, k int, x []float64, ldx int, y []float64, ldy int, c []float64, ldc int) {
	switch {
	case m < 0 || n < 0 || k < 0:
		panic(fmt.Sprintf("fastmat: negative size m=%d n=%d k=%d", m, n, k))
	case ldx < max(k, 1) || ldy < max(n, 1) || ldc < max(n, 1):
		panic(fmt.Sprintf("fastmat: stride too small: ldx=%d (k=%d) ldy=%d (n=%d) ldc=%d", ldx, k, ldy, n, ldc))
	case x != nil && m > 0 && k > 0 && len(x) < (m-1)*ldx+k:
		panic(fmt.Sprintf("fastmat: x has %d elements, needs %d", len(x), (m-1)*ldx+k))
	case k > 0 && n > 0 && len(y) < (k-1)*ldy+n:
		panic(fmt.Sprintf("fastmat: y has %d elements, needs %d", len(y), (k-1)*ldy+n))
	case m > 0 && n > 0 && len(c) < (m-1)*ldc+n:
		panic(fmt.Sprintf("fastmat: c has %d elements, needs %d", len(c), (m-1)*ldc+n))
	}
}
