package online

import (
	"math"
	"math/rand/v2"
	"strconv"
	"testing"

	"gonum.org/v1/gonum/mat"

	"livefield/online/internal/fastmat"
)

// TestCholesky compares the blocked factorisation with gonum's Cholesky
// (a general-purpose reference) on random symmetric positive definite
// matrices of sizes around the panel width and of the prior's window
// (d = 294), and checks that a matrix with a negative pivot is refused.
func TestCholesky(t *testing.T) {
	for _, k := range []int{1, 3, cholBlock - 1, cholBlock, cholBlock + 1, 2*cholBlock + 5, 100, 294} {
		t.Run(strconv.Itoa(k), func(t *testing.T) {
			r := rand.New(rand.NewPCG(uint64(k), 7))
			b := mat.NewDense(k, k, nil)
			for i := range k {
				for j := range k {
					b.Set(i, j, r.NormFloat64())
				}
			}
			var spd mat.SymDense
			spd.SymOuterK(1, b)
			for i := range k {
				spd.SetSym(i, i, spd.At(i, i)+0.1)
			}
			a := make([]float64, k*k)
			for i := range k {
				for j := range k {
					a[i*k+j] = spd.At(i, j)
				}
			}
			var buf fastmat.Buf
			if !cholesky(a, k, make([]float64, cholBlock*k), &buf, nil) {
				t.Fatal("refused a positive definite matrix")
			}
			var ref mat.Cholesky
			if !ref.Factorize(&spd) {
				t.Fatal("gonum refused it too")
			}
			var l mat.TriDense
			ref.LTo(&l)
			worst := 0.0
			for i := range k {
				for j := 0; j <= i; j++ {
					worst = math.Max(worst, math.Abs(a[i*k+j]-l.At(i, j))/math.Sqrt(spd.At(i, i)))
				}
			}
			// Both are backward stable; the factors agree to a few
			// thousand ulps of the conditioning here.
			if worst > 1e-9 {
				t.Errorf("largest difference from gonum's factor %.3g (relative to the diagonal's root)", worst)
			}
		})
	}
	a := []float64{1, 2, 2, 1} // eigenvalues 3 and −1
	if cholesky(a, 2, make([]float64, 2*cholBlock), new(fastmat.Buf), nil) {
		t.Error("accepted an indefinite matrix")
	}
}
