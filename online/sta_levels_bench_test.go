package online

import (
	"math/rand/v2"
	"testing"
)

// BenchmarkSTAFold is the fold of the STA's cross sums alone at the
// reference workload (16×16 binary ±1 noise, 12 lags, 384 units at
// 10 spikes/s in 60 Hz bins): one batch of 256 bins per iteration, by the
// default route (integer counts where the row sums run in assembly) and by
// multiply-adds. The halves alternate every 300 bins
// (the mapper's 5 s chunks); the AddBin calls are timed with the fold, the
// reads' drain of the integer sums once at the end. x-realtime is seconds
// of data (256 bins of 1/60 s) per second of compute.
func BenchmarkSTAFold(b *testing.B) {
	const pixels, lags, units, bins = 256, 12, 384, staBatchBins
	rng := rand.New(rand.NewPCG(21, 22))
	frames := make([][]float64, lags-1+bins)
	for i := range frames {
		frames[i] = make([]float64, pixels)
		binaryFrame(rng, frames[i])
	}
	counts := make([][]Count, bins)
	for k := range counts {
		for u := range units {
			if n := poisson(rng, 10.0/60); n > 0 {
				counts[k] = append(counts[k], Count{Unit: u, N: n})
			}
		}
	}
	x := make([]float64, pixels*lags)
	for _, route := range []string{"default", "float"} {
		b.Run(route, func(b *testing.B) {
			s := NewSTA(pixels, lags)
			s.fold.floatOnly = route == "float"
			s.Grow(units)
			done := 0
			for b.Loop() {
				for k := range bins {
					staLagged(x, frames, k+lags-1, lags)
					s.AddBin(x, (done/300)%2 == 0, counts[k])
					done++
				}
			}
			s.Flush()
			b.ReportMetric(float64(b.N)*bins/60/b.Elapsed().Seconds(), "x-realtime")
		})
	}
}
