package fastmat

import (
	"fmt"
	"math/rand/v2"
	"testing"
)

// BenchmarkMulAdd reports the throughput of the parallel product on the
// shapes the ridge update uses (skinny by 60) and on a square one.
func BenchmarkMulAdd(b *testing.B) {
	for _, s := range []struct{ m, n, k int }{
		{3072, 60, 3072}, {60, 3072, 3072}, {769, 3072, 60}, {1024, 1024, 1024},
	} {
		b.Run(fmt.Sprintf("m=%d,n=%d,k=%d", s.m, s.n, s.k), func(b *testing.B) {
			rng := rand.New(rand.NewPCG(1, 1))
			x, y, c := randSlice(rng, s.m*s.k), randSlice(rng, s.k*s.n), make([]float64, s.m*s.n)
			MulAdd(s.m, s.n, s.k, 1, x, s.k, y, s.n, c, s.n)
			b.ReportAllocs()
			b.ResetTimer()
			for range b.N {
				MulAdd(s.m, s.n, s.k, 1, x, s.k, y, s.n, c, s.n)
			}
			flops := 2 * float64(s.m) * float64(s.n) * float64(s.k) * float64(b.N)
			b.ReportMetric(flops/b.Elapsed().Seconds()/1e9, "GFLOP/s")
		})
	}
}

// BenchmarkKernel compares the micro-kernels on one goroutine (Buf.MulAdd).
func BenchmarkKernel(b *testing.B) {
	const m, n, k = 480, 480, 240
	rng := rand.New(rand.NewPCG(2, 2))
	x, y, c := randSlice(rng, m*k), randSlice(rng, k*n), make([]float64, m*n)
	saved := active
	defer func() { active = saved }()
	for _, kn := range append(append([]microKernel(nil), kernels...), microKernel{name: "go"}) {
		b.Run(kn.name, func(b *testing.B) {
			active = kn
			var buf Buf
			buf.MulAdd(m, n, k, 1, x, k, y, n, c, n)
			b.ReportAllocs()
			b.ResetTimer()
			for range b.N {
				buf.MulAdd(m, n, k, 1, x, k, y, n, c, n)
			}
			b.ReportMetric(2*m*n*k*float64(b.N)/b.Elapsed().Seconds()/1e9, "GFLOP/s")
		})
	}
}
