package online

import (
	"math/rand/v2"
	"testing"

	"livefield/online/internal/lnp"
)

// TestEverSignificantMovie: null units (the six trains) on a correlated
// movie, D = 144, re-tested every second for ten minutes at α = 0.05. The
// number of units ever called significant (Emerging or Reliable at any
// update) must stay within the binomial 99.9 % upper bound for α (the
// α-spending bound of sequential.go). The share ever reaching p < α at some
// update (what the status used to follow) is logged beside it.
func TestEverSignificantMovie(t *testing.T) {
	calibEverCheck(t, Config{Width: 6, Height: 6, Lags: 4, Alpha: 0.05}, &lnp.Movie{W: 6, H: 6, A: 0.7, Rng: rand.New(rand.NewPCG(31, 32))})
}

// TestEverSignificantWhite: the same on white noise.
func TestEverSignificantWhite(t *testing.T) {
	calibEverCheck(t, Config{Width: 6, Height: 6, Lags: 4, Alpha: 0.05, White: true, PixelVariance: 0.25}, &lnp.White{C: 0.5, Rng: rand.New(rand.NewPCG(33, 34))})
}

func calibEverCheck(t *testing.T, cfg Config, stim lnp.Stimulus) {
	const perType = 40
	minutes := int64(10)
	if !longChecks() {
		minutes = 2
	}
	var updates []int64
	for s := int64(1); s <= minutes*60; s++ {
		updates = append(updates, s*60)
	}
	snaps := calibBlock(t, cfg, stim, 41, calibTrains, perType, updates)
	ever := map[string]bool{}
	everP := map[string]bool{}
	for _, s := range snaps {
		for _, u := range s.Units {
			if u.Status == Emerging || u.Status == Reliable {
				ever[u.ID] = true
			}
			if float64(u.PValue) < cfg.Alpha {
				everP[u.ID] = true
			}
		}
	}
	n := perType * len(calibTrains)
	hi := binomialUpper(n, cfg.Alpha)
	t.Logf("%d min, α = %g: %d of %d null units ever significant (bound %d); %d ever had p < α at some update",
		minutes, cfg.Alpha, len(ever), n, hi, len(everP))
	if len(ever) > hi {
		t.Errorf("%d of %d null units ever significant, want ≤ %d", len(ever), n, hi)
	}
}

// TestLookSchedule: looks fall at 25·2^(j−1) spikes and their levels sum
// to at most α (Σ 1/(j(j+1)) telescopes to 1 − 1/(J+1)).
func TestLookSchedule(t *testing.T) {
	for _, tc := range []struct {
		spikes float64
		look   int
	}{{0, 0}, {24.9, 0}, {25, 1}, {49, 1}, {50, 2}, {100, 3}, {12800, 10}, {12799, 9}} {
		if got := LookIndex(tc.spikes); got != tc.look {
			t.Errorf("LookIndex(%g) = %d, want %d", tc.spikes, got, tc.look)
		}
	}
	var sum float64
	for j := 1; j <= 1000; j++ {
		if LookIndex(LookSpikes(j)) != j {
			t.Fatalf("look %d: LookIndex(LookSpikes) = %d", j, LookIndex(LookSpikes(j)))
		}
		sum += LookLevel(0.01, j)
	}
	if sum > 0.01 || sum < 0.01*(1-1.0/1000) {
		t.Errorf("levels of 1000 looks sum to %g, want just below 0.01", sum)
	}
}

// TestPersistence: the target counts as reached only when R has stayed at
// or above it over the last 20 % of the spikes, across at least 3 earlier
// updates.
func TestPersistence(t *testing.T) {
	hist := func(rs ...float64) []HistoryPoint {
		h := make([]HistoryPoint, len(rs))
		for i, r := range rs {
			h[i] = HistoryPoint{Spikes: int64(100 * (i + 1)), Reliability: Float(r)}
		}
		return h
	}
	for _, tc := range []struct {
		name   string
		h      []HistoryPoint
		spikes float64
		R      float64
		want   bool
	}{
		{"steady", hist(0.5, 0.91, 0.92, 0.93, 0.95, 0.95, 0.95, 0.95, 0.95, 0.95), 1000, 0.95, true},
		{"one crossing", hist(0.5, 0.6, 0.7, 0.8, 0.85, 0.85, 0.85, 0.86, 0.87, 0.88), 1000, 0.95, false},
		{"dip in window", hist(0.9, 0.95, 0.95, 0.95, 0.95, 0.95, 0.95, 0.95, 0.85, 0.95), 1000, 0.95, false},
		{"below now", hist(0.95, 0.95, 0.95, 0.95, 0.95, 0.95, 0.95, 0.95, 0.95, 0.95), 1000, 0.89, false},
		{"too few looks", hist(0.95, 0.95), 250, 0.95, false},
		{"dip before window", hist(0.5, 0.5, 0.5, 0.5, 0.5, 0.5, 0.5, 0.95, 0.95, 0.95), 1000, 0.95, true},
	} {
		if got := persistentlyAbove(tc.h, tc.spikes, tc.R, 0.9); got != tc.want {
			t.Errorf("%s: %v, want %v", tc.name, got, tc.want)
		}
	}
}
