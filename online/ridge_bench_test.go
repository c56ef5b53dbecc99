package online

import (
	"fmt"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// ridgeBytes is the memory held by a Ridge's slices.
func ridgeBytes(r *Ridge) float64 {
	n := 0
	for _, s := range append([][]float64{r.p, r.wt, r.obj, r.a, r.y, r.at, r.vt, r.ut, r.s, r.linv, r.linvT, r.et, r.ft}, r.wv...) {
		n += cap(s)
	}
	return float64(8 * n)
}

// BenchmarkRidgeFlush times one second of data at 60 bins/s: 60 AddRow calls
// and one Flush. The reference workload is D=3072 (16×16 pixels × 12 lags)
// and cols=769 (384 units × 2 halves + 1); x-realtime is 1 s divided by the
// time per block.
func BenchmarkRidgeFlush(b *testing.B) {
	const rows = 60
	for _, d := range []int{768, 1536, 3072} {
		for _, cols := range []int{129, 769, 1537} {
			b.Run(fmt.Sprintf("D=%d/cols=%d", d, cols), func(b *testing.B) {
				rng := rand.New(rand.NewPCG(uint64(d), uint64(cols)))
				r, err := NewRidge(d, cols, 100)
				if err != nil {
					b.Fatal(err)
				}
				xs := make([][]float64, rows)
				ys := make([][]float64, rows)
				for k := range rows {
					xs[k] = make([]float64, d)
					for i := range xs[k] {
						xs[k][i] = float64(rng.IntN(2)*2 - 1)
					}
					ys[k] = make([]float64, cols)
					for i := range ys[k] {
						ys[k][i] = float64(rng.IntN(3))
					}
				}
				block := func() {
					for k := range rows {
						r.AddRow(xs[k], ys[k])
					}
					r.Flush()
				}
				block() // grow the buffers
				b.ReportAllocs()
				b.ResetTimer()
				for range b.N {
					block()
				}
				perBlock := b.Elapsed().Seconds() / float64(b.N)
				b.ReportMetric(1/perBlock, "x-realtime")
				b.ReportMetric(ridgeBytes(r)/1e6, "MB")
			})
		}
	}
}

// BenchmarkRidgeAnchor times the re-solve route at the reference dimension
// (16×16 pixels × 12 lags, D = 3072, 769 columns) from the statistics of
// 4000 bins of binary noise: the Gram from a LagGram, the blocked Cholesky
// and inverse (fastmat.InvertSPD), the weights. GFLOPs-lapack is D³ over the
// time, the rate behind the cost model's resolveFlops (the factorisation and
// the inverse dominate).
func BenchmarkRidgeAnchor(b *testing.B) {
	const pixels, lags, cols, bins = 256, 12, 769, 4000
	d := pixels * lags
	rng := rand.New(rand.NewPCG(5, 6))
	g, err := NewLagGram(pixels, lags)
	if err != nil {
		b.Fatal(err)
	}
	frame := make([]float64, pixels)
	for range bins + lags - 1 {
		binaryFrame(rng, frame)
		_ = g.AddFrame(frame)
	}
	sumX := make([]float64, d)
	g.lagSumsTo(sumX)
	cross := make([]float64, cols*(d+1))
	for i := range cross {
		cross[i] = rng.NormFloat64()
	}
	yy := make([]float64, cols)
	for i := range yy {
		yy[i] = 1e6
	}
	r, err := NewRidge(d, cols, 100)
	if err != nil {
		b.Fatal(err)
	}
	gram := func(dst *mat.SymDense) error { return g.GramTo(dst, false) }
	b.ResetTimer()
	for range b.N {
		if err := r.Anchor(bins, gram, sumX, cross, yy); err != nil {
			b.Fatal(err)
		}
	}
	per := b.Elapsed().Seconds() / float64(b.N)
	b.ReportMetric(float64(d)*float64(d)*float64(d)/per/1e9, "GFLOPs-lapack")
	b.ReportMetric(per, "s/solve")
}
