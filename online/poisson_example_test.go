package online_test

import (
	"fmt"
	"log"
	"math"
	"math/rand/v2"

	"livefield/online"
)

// One unit of an exponential LNP model on 6×6 binary noise with 3 lags: a
// minute of bins in a BinStore, then the MAP filter under a smooth-local
// prior (normally the unit's fitted UnitDetail.PriorHyper and PriorWindow;
// here written by hand around the field).
func ExampleBinStore_PoissonMAP() {
	const w, h, lags, bins = 6, 6, 3, 3600
	P := w * h
	filter := make([]float64, P*lags) // a blob at (2, 3), lag 1
	for y := range h {
		for x := range w {
			filter[P+y*w+x] = 0.4 * math.Exp(-float64((x-2)*(x-2)+(y-3)*(y-3))/2)
		}
	}
	store, err := online.NewBinStore(w, h, lags)
	if err != nil {
		log.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(3, 4))
	var frames [][]float64
	for k := range bins + lags - 1 {
		f := make([]float64, P)
		for i := range f {
			f[i] = float64(2*rng.IntN(2) - 1)
		}
		frames = append(frames, f)
		used := k >= lags-1 // a bin needs its full lag history
		var counts []online.Count
		if used {
			drive := -2.0
			for l := range lags {
				for i, v := range frames[k-l] {
					drive += filter[l*P+i] * v
				}
			}
			n := 0 // a Poisson count of mean exp(drive), by inversion
			for p, u := math.Exp(-math.Exp(drive)), rng.Float64(); u > p; n++ {
				u -= p
				p *= math.Exp(drive) / float64(n+1)
			}
			counts = []online.Count{{Unit: 0, N: float64(n)}}
		}
		if err := store.Add(f, counts, used); err != nil {
			log.Fatal(err)
		}
	}
	unit := online.PoissonUnit{
		Unit: 0,
		Hyper: online.SmoothLocal{Scale: 0.01, Noise: 0.1, Length: [3]float64{1.5, 1.5, 1},
			Centre: [3]float64{2, 3, 1}, Width: [3]float64{2, 2, 1}},
		Window: online.PriorWindow{X0: 0, Y0: 1, T0: 0, NX: 5, NY: 5, NT: 3},
	}
	fit, err := store.PoissonMAP(unit, online.PoissonOptions{})
	if err != nil {
		log.Fatal(err)
	}
	fmt.Println("converged:", fit.Converged, "bins:", fit.Bins)
	fmt.Println("intercept within 0.2 of the true −2:", math.Abs(fit.Intercept+2) < 0.2)
	fmt.Println("correlation with the true filter above 0.9:", pearson(fit.Weights, filter) > 0.9)
	// Output:
	// converged: true bins: 3600
	// intercept within 0.2 of the true −2: true
	// correlation with the true filter above 0.9: true
}
