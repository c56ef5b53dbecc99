package online

import (
	"math"
	"math/rand/v2"
	"testing"
)

// BenchmarkPoissonMAPReference refines one unit at the reference workload:
// a 30-minute block of 16×16 binary noise at 60 Hz (108,000 bins, 12 lags)
// with an exp-LNP cell of about 10 spikes/s, in the default 7×7 × 6 window
// (D = 294). It reports the Newton steps and the store's bytes.
func BenchmarkPoissonMAPReference(b *testing.B) {
	const w, h, lags, bins = 16, 16, 12, 108000
	P := w * h
	store, err := NewBinStore(w, h, lags)
	if err != nil {
		b.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(11, 12))
	filter := func(l, x, y int) float64 {
		amp := []float64{0, 0.6, 1, 0.5, -0.2}
		if l >= len(amp) {
			return 0
		}
		return 0.12 * amp[l] * math.Exp(-float64((x-8)*(x-8)+(y-7)*(y-7))/4)
	}
	var frames [][]float64
	for k := range bins + lags - 1 {
		f := make([]float64, P)
		for i := range f {
			f[i] = float64(2*rng.IntN(2) - 1)
		}
		frames = append(frames, f)
		used := k >= lags-1
		var counts []Count
		if used {
			drive := math.Log(10.0 / 60 / 1.3)
			for l := range 5 {
				for y := range h {
					for x := range w {
						drive += filter(l, x, y) * frames[k-l][y*w+x]
					}
				}
			}
			lam, n := math.Exp(drive), 0
			for p, u := math.Exp(-lam), rng.Float64(); u > p; n++ {
				u -= p
				p *= lam / float64(n+1)
			}
			counts = []Count{{Unit: 0, N: float64(n)}}
		}
		if err := store.Add(f, counts, used); err != nil {
			b.Fatal(err)
		}
		if len(frames) > lags {
			frames[len(frames)-lags-1] = nil
		}
	}
	unit := PoissonUnit{
		Hyper: SmoothLocal{Scale: 0.002, Noise: 0.17, Length: [3]float64{1.5, 1.5, 1},
			Centre: [3]float64{8, 7, 2}, Width: [3]float64{2, 2, 1.5}},
		Window: PriorWindow{X0: 5, Y0: 4, T0: 0, NX: 7, NY: 7, NT: 6},
	}
	b.ResetTimer()
	var fit PoissonFit
	for range b.N {
		if fit, err = store.PoissonMAP(unit, PoissonOptions{}); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(fit.Iterations), "newton-steps")
	b.ReportMetric(float64(store.Bytes())/1e6, "store-MB")
}
