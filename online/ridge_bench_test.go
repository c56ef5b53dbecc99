package online

import (
	"fmt"
	"math/rand/v2"
	"testing"
)

// ridgeBytes is the memory held by a Ridge's slices.
func ridgeBytes(r *Ridge) float64 {
	n := 0
	for _, s := range append([][]float64{r.p, r.wt, r.obj, r.a, r.y, r.at, r.vt, r.ut, r.u, r.s, r.linv, r.linvT, r.et, r.ft}, append(r.wv, r.wvt...)...) {
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
				r, err := NewRidge(d, cols, 100, 1)
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
