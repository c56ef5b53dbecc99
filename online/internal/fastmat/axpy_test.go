package fastmat

import (
	"math"
	"math/rand/v2"
	"testing"
)

// TestAddScaled checks the assembly blocks and the Go tail against the plain
// loop (y += a·x, BLAS daxpy's definition: Lawson et al. 1979) at lengths
// around the block size.
func TestAddScaled(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	for _, n := range []int{0, 1, 15, 16, 17, 31, 32, 33, 256, 3072} {
		x, y, want, size := make([]float64, n), make([]float64, n), make([]float64, n), make([]float64, n)
		for i := range x {
			x[i], y[i] = rng.NormFloat64(), rng.NormFloat64()
			want[i] = y[i] + 0.75*x[i]
			size[i] = math.Abs(y[i]) + math.Abs(0.75*x[i])
		}
		AddScaled(y, 0.75, x)
		for i := range y {
			// One rounding (fused) or two: within an ulp of the terms' size.
			if math.Abs(y[i]-want[i]) > 2.3e-16*size[i] {
				t.Fatalf("n = %d: y[%d] = %v, want %v", n, i, y[i], want[i])
			}
		}
	}
}

// TestAddScaled4 checks the four-row form against the plain sums.
func TestAddScaled4(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	a := [4]float64{0.5, -1.25, 2, 0.125}
	for _, n := range []int{0, 3, 16, 19, 48, 256} {
		var x [4][]float64
		for r := range x {
			x[r] = make([]float64, n+2) // longer than dst: only len(dst) is read
			for i := range x[r] {
				x[r][i] = rng.NormFloat64()
			}
		}
		y, want, size := make([]float64, n), make([]float64, n), make([]float64, n)
		for i := range y {
			y[i] = rng.NormFloat64()
			want[i], size[i] = y[i], math.Abs(y[i])
			for r := range x {
				want[i] += a[r] * x[r][i]
				size[i] += math.Abs(a[r] * x[r][i])
			}
		}
		AddScaled4(y, &a, &x)
		for i := range y {
			// Four fused or unfused steps: within a few ulps of the terms' size.
			if math.Abs(y[i]-want[i]) > 1e-15*size[i] {
				t.Fatalf("n = %d: y[%d] = %v, want %v", n, i, y[i], want[i])
			}
		}
	}
}

func BenchmarkAddScaled(b *testing.B) {
	x, y := make([]float64, 256), make([]float64, 256)
	for i := range x {
		x[i] = float64(i)
	}
	b.SetBytes(256 * 8)
	for b.Loop() {
		AddScaled(y, 1e-9, x)
	}
}

func BenchmarkAddScaled4(b *testing.B) {
	var x [4][]float64
	for r := range x {
		x[r] = make([]float64, 256)
	}
	y := make([]float64, 256)
	a := [4]float64{1e-9, 1e-9, 1e-9, 1e-9}
	b.SetBytes(4 * 256 * 8)
	for b.Loop() {
		AddScaled4(y, &a, &x)
	}
}
