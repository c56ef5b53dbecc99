package online

import (
	"fmt"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/stat/distuv"

	"livefield/online/internal/lnp"
)

// calibTrain names a kind of null spike train and makes one.
type calibTrain struct {
	name string
	make func(rng *rand.Rand) lnp.Train
}

// calibTrains are the null spike trains of the calibration checks, each near
// 0.08 spikes per 1/60 s bin (about 5 Hz): Poisson, bursts filling 2, 3 and
// 10 bins, a refractory train, and Poisson with a rate swinging ±80 % over
// three minutes.
var calibTrains = []calibTrain{
	{"poisson", func(r *rand.Rand) lnp.Train { return &lnp.PoissonTrain{Mu: 0.08, Rng: r} }},
	{"burst2", func(r *rand.Rand) lnp.Train { return &lnp.BurstTrain{Onset: 0.04, Span: 2, Mu: 1, Rng: r} }},
	{"burst3", func(r *rand.Rand) lnp.Train { return &lnp.BurstTrain{Onset: 0.08 / 3, Span: 3, Mu: 1, Rng: r} }},
	{"burst10", func(r *rand.Rand) lnp.Train { return &lnp.BurstTrain{Onset: 0.008, Span: 10, Mu: 1, Rng: r} }},
	{"refractory", func(r *rand.Rand) lnp.Train { return &lnp.RefractoryTrain{H: 0.12, Dead: 3, Rng: r} }},
	{"slow", func(r *rand.Rand) lnp.Train { return &lnp.SlowTrain{Mu: 0.08, Depth: 0.8, Period: 3 * 60 * 60, Rng: r} }},
}

// calibBlock runs one block: the stimulus and perUnit null units of each
// train through a Mapper, updating at the given bin counts, and returns each
// update's snapshot.
func calibBlock(t *testing.T, cfg Config, stim lnp.Stimulus, seed uint64, kinds []calibTrain, perType int, updates []int64) []*Snapshot {
	t.Helper()
	m, err := NewMapper(withoutPrior(cfg))
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(seed, 0xca11b))
	var trains []lnp.Train
	for _, tr := range kinds {
		for i := 0; i < perType; i++ {
			m.Unit(fmt.Sprintf("%s-%d", tr.name, i))
			trains = append(trains, tr.make(rand.New(rand.NewPCG(seed, rng.Uint64()))))
		}
	}
	frame := make([]float64, cfg.Width*cfg.Height)
	counts := make([]Count, 0, len(trains))
	var snaps []*Snapshot
	bins := updates[len(updates)-1] + int64(m.Config().Lags) - 1
	next := 0
	for k := int64(0); k < bins; k++ {
		counts = nullBin(t, m, stim, frame, trains, counts)
		if next < len(updates) && m.Bins() == updates[next] {
			snaps = append(snaps, m.Update())
			next++
		}
	}
	return snaps
}

// binomialUpper is the smallest count c with P(X > c) ≤ 0.001 for
// X ~ Binomial(n, α): the one-sided 99.9 % bound on how many of n null units
// a calibrated level-α test may call significant (the binomial
// distribution; gonum's CDF).
func binomialUpper(n int, alpha float64) int {
	b := distuv.Binomial{N: float64(n), P: alpha}
	for c := 0; c <= n; c++ {
		if 1-b.CDF(float64(c)) <= 0.001 {
			return c
		}
	}
	return n
}

// binomialLower is the largest count c with P(X < c) ≤ 0.001.
func binomialLower(n int, alpha float64) int {
	b := distuv.Binomial{N: float64(n), P: alpha}
	for c := n; c >= 0; c-- {
		if c == 0 || b.CDF(float64(c-1)) <= 0.001 {
			return c
		}
	}
	return 0
}

// TestCountAutocovExact: the centred count autocovariance from the running
// sums equals the direct sum Σ_k (y_k − ȳ)(y_{k+d} − ȳ) over a train with
// a unit listed twice in some bins (definition; no source needed).
func TestCountAutocovExact(t *testing.T) {
	rng := rand.New(rand.NewPCG(91, 92))
	const bins, K = 500, 6
	c := newCountAutocov(K)
	c.grow(1)
	y := make([]float64, bins)
	for b := range y {
		for range 2 {
			if rng.Float64() < 0.3 {
				n := float64(1 + rng.IntN(3))
				c.add(0, int64(b), n)
				y[b] += n
			}
		}
	}
	var sy float64
	for _, v := range y {
		sy += v
	}
	mean := sy / bins
	got := make([]float64, K+1)
	c.autocovTo(got, 0, bins, sy)
	for d := 0; d <= K; d++ {
		var want float64
		for k := 0; k+d < bins; k++ {
			want += (y[k] - mean) * (y[k+d] - mean)
		}
		if diff := got[d] - want; diff > 1e-9*bins || diff < -1e-9*bins {
			t.Errorf("A(%d) = %g, direct %g", d, got[d], want)
		}
	}
}

// longChecks is false under -short and under the race detector: the long
// calibration blocks then run shorter variants (fewer minutes, fewer
// looks), which still catch a broken correction but with wider bounds.
func longChecks() bool { return !testing.Short() && !raceEnabled }

// nullBin draws the next frame and a count from each train and adds the bin
// to m; counts is reused.
func nullBin(t *testing.T, m *Mapper, stim lnp.Stimulus, frame []float64, trains []lnp.Train, counts []Count) []Count {
	stim.Next(frame)
	counts = counts[:0]
	for u, tr := range trains {
		if n := tr.Next(); n > 0 {
			counts = append(counts, Count{Unit: u, N: n})
		}
	}
	if err := m.AddBin(frame, counts); err != nil {
		t.Fatal(err)
	}
	return counts
}

// calibStimulus is a test stimulus with the mapper configuration that goes
// with it: binary white noise of contrast 0.5, or the AR(0.7) movie, on
// 6×6 pixels with 4 lags.
type calibStimulus struct {
	name string
	cfg  Config
	stim lnp.Stimulus
}

func calibStimuli(seed uint64) []calibStimulus {
	return []calibStimulus{
		{"white", Config{Width: 6, Height: 6, Lags: 4, White: true, PixelVariance: 0.25}, &lnp.White{C: 0.5, Rng: rand.New(rand.NewPCG(seed, 1))}},
		{"movie", Config{Width: 6, Height: 6, Lags: 4}, &lnp.Movie{W: 6, H: 6, A: 0.7, Rng: rand.New(rand.NewPCG(seed, 2))}},
	}
}

// withoutPrior turns the smooth-local estimate's background fits off in
// tests of the other statistics: they would only take the CPU those need.
func withoutPrior(cfg Config) Config {
	cfg.NoPrior = true
	return cfg
}
