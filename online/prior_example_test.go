package online_test

import (
	"fmt"
	"log"
	"math"
	"math/rand/v2"

	"livefield/online"
)

// A unit with a small smooth field on 8×8 binary noise with 4 lags: one
// minute of bins, then its smooth-local estimate from the shared Gram
// matrix and the unit's own sums.
func ExamplePriorFitter() {
	const w, h, lags, bins = 8, 8, 4, 3600
	P, D := w*h, w*h*lags
	// The true filter: a Gaussian blob at (3, 4) at lag 1, weaker at lag 2.
	filter := make([]float64, D)
	for t, amp := range []float64{0, 1, 0.5, 0} {
		for y := range h {
			for x := range w {
				r2 := float64((x-3)*(x-3) + (y-4)*(y-4))
				filter[t*P+y*w+x] = 0.25 * amp * math.Exp(-r2/3)
			}
		}
	}
	rng := rand.New(rand.NewPCG(1, 2))
	gram, err := online.NewLagGram(P, lags)
	if err != nil {
		log.Fatal(err)
	}
	sta := online.NewSTA(P, lags)
	frames := make([][]float64, 0, bins+lags)
	x := make([]float64, D)
	for k := range bins + lags - 1 {
		f := make([]float64, P)
		for i := range f {
			f[i] = float64(2*rng.IntN(2) - 1)
		}
		frames = append(frames, f)
		if err := gram.AddFrame(f); err != nil {
			log.Fatal(err)
		}
		if k < lags-1 {
			continue
		}
		var drive float64
		for t := range lags {
			copy(x[t*P:(t+1)*P], frames[k-t])
		}
		for i, v := range x {
			drive += filter[i] * v
		}
		// Poisson count of mean exp(drive − 2) by inversion.
		mean, n := math.Exp(drive-2), 0
		for p, u := math.Exp(-math.Exp(drive-2)), rng.Float64(); u > p; n++ {
			u -= p
			p *= mean / float64(n+1)
		}
		sta.AddBin(x, true, []online.Count{{Unit: 0, N: float64(n)}})
	}

	view, err := gram.View() // read-only: a worker may fit from it while the gram goes on
	if err != nil {
		log.Fatal(err)
	}
	st := online.PriorStats{Gram: view, Cross: make([]float64, D), Seed: make([]float64, D)}
	sta.CrossTo(st.Cross, 0)
	ac := make([]float64, lags)
	sta.AutocovTo(ac, 0)
	st.YY = ac[0]
	sta.STATo(st.Seed, 0) // the STA places the window
	fitter, err := online.NewPriorFitter(w, h, lags, online.PriorOptions{WindowPixels: 5, WindowLags: 3})
	if err != nil {
		log.Fatal(err)
	}
	fit, err := fitter.Refit(0, st)
	if err != nil {
		log.Fatal(err)
	}
	fmt.Printf("window %+v\n", fit.Window)
	fmt.Println("correlation with the true filter above 0.9:", pearson(fit.Weights, filter) > 0.9)
	// Output:
	// window {X0:1 Y0:2 T0:1 NX:5 NY:5 NT:3}
	// correlation with the true filter above 0.9: true
}

func pearson(a, b []float64) float64 {
	var ma, mb float64
	for i := range a {
		ma += a[i] / float64(len(a))
		mb += b[i] / float64(len(b))
	}
	var ab, aa, bb float64
	for i := range a {
		ab += (a[i] - ma) * (b[i] - mb)
		aa += (a[i] - ma) * (a[i] - ma)
		bb += (b[i] - mb) * (b[i] - mb)
	}
	return ab / math.Sqrt(aa*bb)
}
