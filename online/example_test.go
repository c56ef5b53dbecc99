package online_test

import (
	"fmt"
	"math/rand/v2"

	"livefield/online"
)

// A unit that fires more when pixel (2, 1) was bright two frames ago, seen
// through 8×6 binary noise at 60 Hz: one Update per second of bins, as the
// ingest does. Each Update folds the bins since the last one into the exact
// ridge, here by the block update (the first 3 bins lack a full lag
// history); the field shows at lag 2, centred on pixel (2, 1).
func ExampleMapper() {
	const w, h = 8, 6
	m, err := online.NewMapper(online.Config{Width: w, Height: h, Lags: 4, White: true, PixelVariance: 1})
	if err != nil {
		fmt.Println(err)
		return
	}
	unit := m.Unit("ch03.1")
	rng := rand.New(rand.NewPCG(1, 2))
	var history [3][]float64 // the frames one, two and three bins ago
	var snap *online.Snapshot
	for second := range 40 {
		for range 60 {
			frame := make([]float64, w*h)
			for i := range frame {
				frame[i] = float64(2*rng.IntN(2) - 1)
			}
			var counts []online.Count
			rate := 0.1
			if history[1] != nil && history[1][1*w+2] > 0 {
				rate = 0.6
			}
			if rng.Float64() < rate {
				counts = append(counts, online.Count{Unit: unit, N: 1})
			}
			if err := m.AddBin(frame, counts); err != nil {
				fmt.Println(err)
				return
			}
			history[0], history[1], history[2] = frame, history[0], history[1]
		}
		snap = m.Update()
		if second == 0 {
			fmt.Printf("first update: %s route, %d bins folded\n", snap.Solve.Route, snap.Solve.Bins)
		}
	}
	d, _ := snap.Detail("ch03.1")
	significant := d.Status == online.Emerging || d.Status == online.Reliable
	fmt.Printf("after %d bins (%d folded): significant %v, peak lag %d, centre (%.0f, %.0f)\n",
		m.Bins(), m.Folded(), significant, d.PeakLag, d.CentreX, d.CentreY)
	// Output:
	// first update: woodbury route, 57 bins folded
	// after 2397 bins (2397 folded): significant true, peak lag 2, centre (2, 1)
}
