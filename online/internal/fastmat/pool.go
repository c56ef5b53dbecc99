package fastmat

import (
	"runtime"
	"sync"
	"sync/atomic"
)

// Task is a set of independent pieces of work, numbered 0…n−1. Do runs piece
// i on the worker numbered w (0 ≤ w < Workers()); no two pieces run on the
// same worker at the same time, so w may index per-worker scratch space.
type Task interface {
	Do(i, w int)
}

var pool struct {
	once  sync.Once
	mu    sync.Mutex // one job at a time
	n     int
	next  atomic.Int64
	task  Task
	wake  []chan struct{}
	done  sync.WaitGroup
	bufs  []Buf
	mul   mulJob
	nwork int
	// packed holds Y packed once for all the row strips of a MulAdd
	// (packedY).
	packed []float64
}

// Workers is the number of goroutines (the caller's included) that share a
// job: runtime.GOMAXPROCS at first use.
func Workers() int {
	pool.once.Do(startPool)
	return pool.nwork
}

func startPool() {
	pool.nwork = max(1, runtime.GOMAXPROCS(0))
	pool.bufs = make([]Buf, pool.nwork)
	pool.wake = make([]chan struct{}, pool.nwork)
	for w := 1; w < pool.nwork; w++ {
		pool.wake[w] = make(chan struct{}, 1)
		go worker(w)
	}
}

func worker(w int) {
	for range pool.wake[w] {
		run(w)
		pool.done.Done()
	}
}

func run(w int) {
	for {
		i := int(pool.next.Add(1) - 1)
		if i >= pool.n {
			return
		}
		pool.task.Do(i, w)
	}
}

// Each runs t.Do(i, w) for every i in [0, n) on up to Workers() goroutines,
// the caller's included, and returns when all are done. Pieces are handed
// out in increasing i, so put the largest first. It does not allocate.
func Each(n int, t Task) {
	Workers()
	pool.mu.Lock()
	defer pool.mu.Unlock()
	each(n, t)
}

func each(n int, t Task) {
	if n <= 0 {
		return
	}
	pool.n = n
	pool.task = t
	pool.next.Store(0)
	helpers := min(pool.nwork-1, n-1)
	pool.done.Add(helpers)
	for w := 1; w <= helpers; w++ {
		pool.wake[w] <- struct{}{}
	}
	run(0)
	pool.done.Wait()
	pool.task = nil
}

// mulJob splits one product into row strips (or column strips when C is
// short and wide).
type mulJob struct {
	m, n, k       int
	alpha         float64
	x, y, c       []float64
	ldx, ldy, ldc int
	step, pieces  int
	byCols        bool
	packed        []float64 // Y packed whole, for row strips (nil: each strip packs)
}

func (j *mulJob) Do(i, w int) {
	lo := i * j.step
	if j.packed != nil {
		hi := min(j.m, lo+j.step)
		pool.bufs[w].mulAddPacked(hi-lo, j.n, j.k, j.alpha, j.x[lo*j.ldx:], j.ldx, j.packed, j.c[lo*j.ldc:], j.ldc)
		return
	}
	if j.byCols {
		hi := min(j.n, lo+j.step)
		pool.bufs[w].mulAdd(j.m, hi-lo, j.k, j.alpha, j.x, j.ldx, false, j.y[lo:], j.ldy, j.c[lo:], j.ldc)
		return
	}
	hi := min(j.m, lo+j.step)
	pool.bufs[w].mulAdd(hi-lo, j.n, j.k, j.alpha, j.x[lo*j.ldx:], j.ldx, false, j.y, j.ldy, j.c[lo*j.ldc:], j.ldc)
}

// MulAdd computes C += alpha·X·Y, where X is m×k, Y is k×n and C is m×n,
// all row-major with strides ldx, ldy and ldc, spreading row (or column)
// strips of C over Workers() goroutines. It does not allocate once the
// per-worker buffers have grown.
func MulAdd(m, n, k int, alpha float64, x []float64, ldx int, y []float64, ldy int, c []float64, ldc int) {
	check(m, n, k, x, ldx, y, ldy, c, ldc)
	if m == 0 || n == 0 || k == 0 || alpha == 0 {
		return
	}
	nw := Workers()
	pool.mu.Lock()
	defer pool.mu.Unlock()
	j := &pool.mul
	*j = mulJob{m: m, n: n, k: k, alpha: alpha, x: x, y: y, c: c, ldx: ldx, ldy: ldy, ldc: ldc}
	// Several strips per worker balance the load when a core is busy elsewhere.
	want := 4 * nw
	if 2*float64(m)*float64(n)*float64(k) < 1<<20 {
		want = 1 // too small to be worth waking a worker
	}
	if m >= n {
		j.step = roundUp(max(active.mr, (m+want-1)/want), max(active.mr, 1))
		j.pieces = (m + j.step - 1) / j.step
		j.packed = packedY(j.pieces, k, n, y, ldy)
	} else {
		j.byCols = true
		j.step = roundUp(max(active.nr, (n+want-1)/want), max(active.nr, 1))
		j.pieces = (n + j.step - 1) / j.step
	}
	each(j.pieces, j)
	*j = mulJob{}
}

// packedY packs Y (k×n) whole into pool.packed for a product of the given
// number of row strips, when the strips would otherwise each pack all of
// it: with more than one strip, Y no deeper than one cache slab (k ≤ kc)
// and a kernel to read the panels. Otherwise it returns nil.
func packedY(pieces, k, n int, y []float64, ldy int) []float64 {
	if pieces < 2 || k > kc || active.fn == nil {
		return nil
	}
	return packWhole(&pool.packed, k, n, y, ldy)
}

// packWhole packs Y (k×n, k ≤ kc) whole for the active kernel into *buf,
// grown if needed, and returns the packed panels (for Buf.mulAddPacked).
func packWhole(buf *[]float64, k, n int, y []float64, ldy int) []float64 {
	need := k * roundUp(n, active.nr)
	if len(*buf) < need {
		*buf = make([]float64, need)
	}
	packY(*buf, k, n, active.nr, y, ldy)
	return (*buf)[:need]
}

func roundUp(v, q int) int { return (v + q - 1) / q * q }
