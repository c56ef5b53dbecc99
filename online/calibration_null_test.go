package online

import (
	"math/rand/v2"
	"strconv"
	"strings"
	"testing"

	"livefield/online/internal/lnp"
)

// TestNullCalibrationMovie: units whose spikes are independent of a
// correlated movie (AR coefficient 0.7 per frame, neighbouring pixels
// correlated), 6×6 pixels and 4 lags (D = 144), with Poisson, bursting,
// refractory and slowly modulated trains. At 5 s, 20 s, 60 s and 10 min the
// share of units with p < α, for α = 0.05, 0.01 and 0.001, must lie within
// the binomial 99.9 % bounds (binomialUpper/Lower): per train at α = 0.05,
// pooled over trains at the smaller α.
func TestNullCalibrationMovie(t *testing.T) {
	calibNullCheck(t, Config{Width: 6, Height: 6, Lags: 4}, func(r *rand.Rand) lnp.Stimulus {
		return &lnp.Movie{W: 6, H: 6, A: 0.7, Rng: r}
	}, calibLooks, calibLooks[:3])
}

// TestNullCalibrationMixedMovie: the same on a movie whose lag covariance
// is not separable (even pixels AR 0.95, odd pixels AR 0.3), where the
// pixel-averaged temporal correlation alone misjudges the bursting trains
// (21 of 100 3-bin-burst units at p < 0.05 at 20 s); the null mean from the
// full lag covariances (frames of up to 144 pixels) fixes it from 20 s on.
// Not at 5 s: a 10-bin-burst unit then has two or three bursts against a
// stimulus correlated over 20 frames, and its statistic has far fewer
// degrees of freedom than the separable model's shape assumes (31 of 100
// at p < 0.05).
func TestNullCalibrationMixedMovie(t *testing.T) {
	calibNullCheck(t, Config{Width: 6, Height: 6, Lags: 4}, func(r *rand.Rand) lnp.Stimulus {
		return &lnp.MixedMovie{A: 0.95, B: 0.3, Rng: r}
	}, calibLooks[1:], calibLooks[1:2])
}

// TestNullCalibrationWhite: the same on binary white noise through the
// white-noise STA test.
func TestNullCalibrationWhite(t *testing.T) {
	calibNullCheck(t, Config{Width: 6, Height: 6, Lags: 4, White: true, PixelVariance: 0.25}, func(r *rand.Rand) lnp.Stimulus {
		return &lnp.White{C: 0.5, Rng: r}
	}, calibLooks, calibLooks[:3])
}

// calibLooks are the updates of the null checks: 5 s, 20 s, 60 s, 10 min;
// under -short and -race a shorter list and one block.
var calibLooks = []int64{5 * 60, 20 * 60, 60 * 60, 600 * 60}

func calibNullCheck(t *testing.T, cfg Config, stim func(*rand.Rand) lnp.Stimulus, updates, short []int64) {
	perType, blocks := 50, 2
	if !longChecks() {
		updates, blocks = short, 1
	}
	alphas := []float64{0.05, 0.01, 0.001}
	// hits[look][train][alpha]
	hits := make([][][3]int, len(updates))
	for i := range hits {
		hits[i] = make([][3]int, len(calibTrains))
	}
	for b := 0; b < blocks; b++ {
		snaps := calibBlock(t, cfg, stim(rand.New(rand.NewPCG(uint64(b), 77))), uint64(100+b), calibTrains, perType, updates)
		for i, s := range snaps {
			for _, u := range s.Units {
				tr := calibTrainIndex(u.ID)
				for a, alpha := range alphas {
					if float64(u.PValue) < alpha {
						hits[i][tr][a]++
					}
				}
			}
		}
	}
	n := perType * blocks
	for i, bins := range updates {
		for a, alpha := range alphas {
			total := 0
			var line strings.Builder
			for tr := range calibTrains {
				h := hits[i][tr][a]
				total += h
				line.WriteString(" " + calibTrains[tr].name + "=" + itoa(h))
				if a == 0 {
					if lo, hi := binomialLower(n, alpha), binomialUpper(n, alpha); h < lo || h > hi {
						t.Errorf("%ds, α=%g, %s: %d of %d null units with p < α, want %d…%d",
							bins/60, alpha, calibTrains[tr].name, h, n, lo, hi)
					}
				}
			}
			N := n * len(calibTrains)
			lo, hi := binomialLower(N, alpha), binomialUpper(N, alpha)
			t.Logf("%4ds α=%-5g: %3d of %d (bound %d…%d):%s", bins/60, alpha, total, N, lo, hi, line.String())
			if total < lo || total > hi {
				t.Errorf("%ds, α=%g: %d of %d null units with p < α, want %d…%d", bins/60, alpha, total, N, lo, hi)
			}
		}
	}
}

func calibTrainIndex(id string) int {
	for i, tr := range calibTrains {
		if strings.HasPrefix(id, tr.name+"-") {
			return i
		}
	}
	panic(id)
}

func itoa(i int) string { return strconv.Itoa(i) }

// TestNullCalibrationEarly: early in a block on a movie at a dimension near
// the number of bins (8×8 pixels, 4 lags, D = 256, at 5 s and 10 s: 300 and
// 600 bins), where the residual degrees of freedom n − 1 − 2t1 + t2 and the
// F reference matter; Poisson null units, bounds as above.
func TestNullCalibrationEarly(t *testing.T) {
	const units = 400
	cfg := Config{Width: 8, Height: 8, Lags: 4}
	updates := []int64{5 * 60, 10 * 60}
	snaps := calibBlock(t, cfg, &lnp.Movie{W: 8, H: 8, A: 0.7, Rng: rand.New(rand.NewPCG(5, 55))}, 9, calibTrains[:1], units, updates)
	for i, s := range snaps {
		for _, alpha := range []float64{0.05, 0.01, 0.001} {
			h := 0
			for _, u := range s.Units {
				if float64(u.PValue) < alpha {
					h++
				}
			}
			lo, hi := binomialLower(units, alpha), binomialUpper(units, alpha)
			t.Logf("%2ds α=%-5g: %3d of %d null units with p < α (bound %d…%d)", updates[i]/60, alpha, h, units, lo, hi)
			if h < lo || h > hi {
				t.Errorf("%ds, α=%g: %d of %d null units with p < α, want %d…%d", updates[i]/60, alpha, h, units, lo, hi)
			}
		}
	}
}
