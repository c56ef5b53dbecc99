package online

import (
	"math"
	"math/rand/v2"
	"testing"
)

// TestCrossHalvesOnePass: the one-pass cross-correlation, STA and split-half
// STAs equal, bit for bit, CrossTo, cross/spikes and HalvesTo (their
// definitions, sta.go), with the means cached and without, for units with
// spikes in both halves, in one half only, and none.
func TestCrossHalvesOnePass(t *testing.T) {
	const pixels, lags, units = 9, 3, 4
	rng := rand.New(rand.NewPCG(31, 32))
	s := NewSTA(pixels, lags)
	x := make([]float64, pixels*lags)
	for k := range 3000 {
		for i := range x {
			x[i] = float64(2*int(rng.Uint64()>>63) - 1)
		}
		halfA := (k/300)%2 == 0
		var counts []Count
		if n := poisson(rng, 0.3); n > 0 {
			counts = append(counts, Count{Unit: 0, N: n})
		}
		if n := poisson(rng, 0.1); n > 0 && halfA {
			counts = append(counts, Count{Unit: 1, N: n}) // half A only
		}
		if n := poisson(rng, 0.05); n > 0 {
			counts = append(counts, Count{Unit: 3, N: n}) // unit 2 never spikes
		}
		s.AddBin(x, halfA, counts)
	}
	d := s.Dim()
	for _, cached := range []bool{false, true} {
		if cached {
			s.CacheMeans()
		}
		for u := range units {
			cross, sta, a, b := make([]float64, d), make([]float64, d), make([]float64, d), make([]float64, d)
			s.crossHalvesTo(cross, sta, a, b, u)
			wantCross, wantA, wantB := make([]float64, d), make([]float64, d), make([]float64, d)
			s.CrossTo(wantCross, u)
			s.HalvesTo(wantA, wantB, u)
			for i := range d {
				wantSTA := 0.0
				if ny := s.Spikes(u); ny > 0 {
					wantSTA = wantCross[i] * (1 / ny)
				}
				for _, c := range []struct {
					name      string
					got, want float64
				}{{"cross", cross[i], wantCross[i]}, {"STA", sta[i], wantSTA}, {"half A", a[i], wantA[i]}, {"half B", b[i], wantB[i]}} {
					if math.Float64bits(c.got) != math.Float64bits(c.want) {
						t.Fatalf("cached %v, unit %d, %s[%d] = %v, want %v", cached, u, c.name, i, c.got, c.want)
					}
				}
			}
		}
	}
}
