// Package fastmat owns the dense matrix kernel behind the online estimators:
// C += α·X·Y for row-major float64 operands, with assembly micro-kernels
// (AVX-512, 12×16 register blocks; AVX2+FMA, 4×12) chosen at start-up from
// golang.org/x/sys/cpu, edge blocks computed through zero-padded scratch, a
// pure-Go path for CPUs without those features, plus a small fixed pool of worker goroutines that spreads
// independent tasks over runtime.GOMAXPROCS cores without allocating.
// InvertSPD inverts a symmetric positive definite matrix by a blocked
// Cholesky factorisation, triangular inverse and product, nearly all of it
// on the kernel (gonum's LAPACK is its reference in the tests).
//
// # Goroutines
//
// A Buf belongs to one goroutine at a time; Buf.MulAdd runs on the calling
// goroutine only. MulAdd and Each may be called from any goroutine; calls are
// serialised (one parallel job runs at a time, the others wait), and a Task
// must not call MulAdd or Each itself. The worker goroutines are started on
// first use and live for the rest of the process.
//
// # Operands
//
// Operands are row-major slices with a leading dimension (row stride) of at
// least the row length: element (i, j) of X is x[i*ldx+j]. C must not alias
// X or Y. Misuse (negative sizes, short slices, small strides) panics with a
// message prefixed "fastmat: ", like an index out of range; there is no data
// that the kernel can reject.
package fastmat
