package fastmat

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/lapack/lapack64"
)

// randSPD returns a random n×n SPD matrix Gᵀ·G/m + λI (stride lda, full),
// the shape of a penalised Gram matrix.
func randSPD(rng *rand.Rand, n, lda int, lambda float64) []float64 {
	m := 2 * n
	g := randSlice(rng, m*n)
	a := make([]float64, n*lda)
	var buf Buf
	gt := make([]float64, n*m)
	Transpose(m, n, g, n, gt, m)
	buf.MulAdd(n, n, m, 1/float64(m), gt, m, g, n, a, lda)
	for i := range n {
		a[i*lda+i] += lambda
		for j := range i { // exact symmetry
			a[j*lda+i] = a[i*lda+j]
		}
	}
	return a
}

// gonumInverse inverts the SPD matrix by gonum's LAPACK (Potrf, Potri), the
// reference implementation, and returns it in full.
func gonumInverse(n, lda int, a []float64) []float64 {
	p := append([]float64(nil), a...)
	t, ok := lapack64.Potrf(blas64.Symmetric{Uplo: blas.Upper, N: n, Stride: lda, Data: p})
	if !ok {
		return nil
	}
	if _, ok := lapack64.Potri(t); !ok {
		return nil
	}
	for i := range n {
		for j := range i {
			p[i*lda+j] = p[j*lda+i]
		}
	}
	return p
}

// TestInvertSPDMatchesLAPACK compares the blocked inverse with gonum's
// Potrf+Potri (reference implementation of LAPACK) on sizes around the block
// size, to 1e-10 relative (Frobenius); the matrices have condition numbers
// near 1e3, so both should agree to about 1e-13.
func TestInvertSPDMatchesLAPACK(t *testing.T) {
	for _, tc := range []struct{ n, lda int }{
		{1, 1}, {2, 5}, {7, 7}, {95, 96}, {96, 96}, {97, 108}, {193, 200}, {300, 300}, {401, 408},
	} {
		t.Run(fmt.Sprintf("n=%d,lda=%d", tc.n, tc.lda), func(t *testing.T) {
			rng := rand.New(rand.NewPCG(uint64(tc.n), 9))
			a := randSPD(rng, tc.n, tc.lda, 1e-3)
			want := gonumInverse(tc.n, tc.lda, a)
			got := append([]float64(nil), a...)
			// The upper triangle is not read: spoil it.
			for i := range tc.n {
				for j := i + 1; j < tc.n; j++ {
					got[i*tc.lda+j] = math.NaN()
				}
			}
			var s SPDScratch
			if !InvertSPD(tc.n, got, tc.lda, &s) {
				t.Fatal("InvertSPD: not positive definite")
			}
			var num, den float64
			for i := range tc.n {
				for j := range tc.n {
					d := got[i*tc.lda+j] - want[i*tc.lda+j]
					num += d * d
					den += want[i*tc.lda+j] * want[i*tc.lda+j]
				}
			}
			if rel := math.Sqrt(num / den); !(rel < 1e-10) {
				t.Errorf("relative difference from LAPACK %.3g, want < 1e-10", rel)
			}
		})
	}
}

// TestInvertSPDRefusesIndefinite: a matrix with a negative eigenvalue (in
// the second block) or a NaN is refused, as LAPACK's Potrf refuses it.
func TestInvertSPDRefusesIndefinite(t *testing.T) {
	const n = 150
	rng := rand.New(rand.NewPCG(3, 3))
	for name, spoil := range map[string]func(a []float64){
		"negative": func(a []float64) { a[120*n+120] = -1e3 },
		"nan":      func(a []float64) { a[130*n+5] = math.NaN() },
	} {
		a := randSPD(rng, n, n, 1e-3)
		spoil(a)
		var s SPDScratch
		if InvertSPD(n, a, n, &s) {
			t.Errorf("%s: InvertSPD accepted the matrix", name)
		}
	}
}

// BenchmarkInvertSPD compares the blocked inverse with gonum's Potrf+Potri
// in the same run, at the ridge's reference size (16×16 pixels × 12 lags,
// plus the intercept) and a smaller one. GFLOP/s counts n³ flops (n³/3 for
// each of the factorisation, the triangular inverse and the product).
func BenchmarkInvertSPD(b *testing.B) {
	for _, n := range []int{1025, 3073} {
		lda := (n + 11) / 12 * 12
		rng := rand.New(rand.NewPCG(4, 4))
		a := randSPD(rng, n, lda, 1e-2)
		work := make([]float64, len(a))
		b.Run(fmt.Sprintf("blocked/n=%d", n), func(b *testing.B) {
			var s SPDScratch
			b.ReportAllocs()
			for range b.N {
				copy(work, a)
				if !InvertSPD(n, work, lda, &s) {
					b.Fatal("not positive definite")
				}
			}
			b.ReportMetric(math.Pow(float64(n), 3)*float64(b.N)/b.Elapsed().Seconds()/1e9, "GFLOP/s")
		})
		b.Run(fmt.Sprintf("gonum/n=%d", n), func(b *testing.B) {
			for range b.N {
				copy(work, a)
				t, ok := lapack64.Potrf(blas64.Symmetric{Uplo: blas.Upper, N: n, Stride: lda, Data: work})
				if !ok {
					b.Fatal("not positive definite")
				}
				lapack64.Potri(t)
			}
			b.ReportMetric(math.Pow(float64(n), 3)*float64(b.N)/b.Elapsed().Seconds()/1e9, "GFLOP/s")
		})
	}
}
