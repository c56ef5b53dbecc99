package online

import (
	"math/rand/v2"
	"testing"
)

// BenchmarkSamplingDiag is the update's pass over P for the sampling
// variances and the hat traces at the reference dimension (D = 3072).
func BenchmarkSamplingDiag(b *testing.B) {
	const d = 3072
	r, err := NewRidge(d, 1, 1)
	if err != nil {
		b.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(7, 8))
	x := make([]float64, d)
	for range 120 {
		binaryFrame(rng, x)
		r.AddRow(x, []float64{rng.NormFloat64()})
	}
	r.Flush()
	dst := make([]float64, d)
	b.ResetTimer()
	for range b.N {
		r.samplingDiagTraces(dst)
	}
}
