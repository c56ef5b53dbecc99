package display

import (
	"math"
	"math/rand/v2"
	"sync"
	"testing"

	"livefield/online"
)

// A tiny linear–nonlinear–Poisson simulation of our own: binary ±1 noise
// frames, each cell a Gaussian spatial field at a known position with a
// two-lag time course, rectified-linear rate, Poisson counts.
const (
	simWidth, simHeight, simLags = 16, 16, 8
	simBins                      = 3000
)

type simCell struct {
	id          string
	x, y, sigma float64 // centre (column, row) and extent in pixels
	base, gain  float64 // spikes per bin at zero drive, and per unit of drive
	on          bool    // bright-preferring
	fieldless   bool
}

var simCells = []simCell{
	{id: "12", x: 4, y: 11, sigma: 1.5, base: 1.0, gain: 0.4, on: true},
	{id: "7", x: 11, y: 4, sigma: 1.2, base: 0.8, gain: 0.3, on: false},
	{id: "3", base: 0.3, fieldless: true},
}

// strongCell is the cell whose field tests look for.
var strongCell = simCells[0]

// simLagWeights is the time course: the field acts two and three frames
// after it was shown.
var simLagWeights = [simLags]float64{0, 0, 1, 0.5}

type sim struct {
	m     *online.Mapper
	units []int
	rng   *rand.Rand
	hist  [][]float64 // the last simLags frames, newest first
	field [][]float64 // per cell, spatial field
}

func newSim(t testing.TB, seed uint64) *sim {
	m, err := online.NewMapper(online.Config{Width: simWidth, Height: simHeight, Lags: simLags, White: true, PixelVariance: 1, PriorInline: online.PriorInlineAll})
	if err != nil {
		t.Fatal(err)
	}
	s := &sim{m: m, rng: rand.New(rand.NewPCG(seed, 1))}
	for _, c := range simCells {
		s.units = append(s.units, m.Unit(c.id))
		f := make([]float64, simWidth*simHeight)
		if !c.fieldless {
			sign := 1.0
			if !c.on {
				sign = -1
			}
			for r := range simHeight {
				for col := range simWidth {
					dx, dy := float64(col)-c.x, float64(r)-c.y
					f[r*simWidth+col] = sign * math.Exp(-(dx*dx+dy*dy)/(2*c.sigma*c.sigma))
				}
			}
		}
		s.field = append(s.field, f)
	}
	for range simLags {
		s.hist = append(s.hist, make([]float64, simWidth*simHeight))
	}
	return s
}

func (s *sim) run(bins int) {
	counts := make([]online.Count, len(simCells))
	for range bins {
		frame := s.hist[len(s.hist)-1]
		copy(s.hist[1:], s.hist[:len(s.hist)-1])
		s.hist[0] = frame
		for p := range frame {
			frame[p] = float64(2*s.rng.IntN(2) - 1)
		}
		for i, c := range simCells {
			drive := 0.0
			for l, w := range simLagWeights {
				if w == 0 {
					continue
				}
				for p, k := range s.field[i] {
					drive += w * k * s.hist[l][p]
				}
			}
			counts[i] = online.Count{Unit: s.units[i], N: float64(poisson(s.rng, math.Max(0, c.base+c.gain*drive)))}
		}
		s.m.AddBin(frame, counts)
	}
}

// poisson draws a Poisson count by multiplying uniforms (Knuth, TAOCP vol. 2,
// 3.4.1); fine for the small rates used here.
func poisson(rng *rand.Rand, lambda float64) int {
	l, k, p := math.Exp(-lambda), 0, 1.0
	for {
		p *= rng.Float64()
		if p <= l {
			return k
		}
		k++
	}
}

var (
	simOnce  sync.Once
	simState *sim
	simSnap  *online.Snapshot
)

// simulated returns the snapshot after simBins bins, computed once per test
// binary.
func simulated(t testing.TB) *online.Snapshot {
	simOnce.Do(func() {
		simState = newSim(t, 7)
		simState.run(simBins)
		simSnap = simState.m.Update()
	})
	if _, ok := simSnap.Detail(strongCell.id); !ok {
		t.Fatalf("simulated snapshot has no unit %q (units %d)", strongCell.id, len(simSnap.Units))
	}
	return simSnap
}
