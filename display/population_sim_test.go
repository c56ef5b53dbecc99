package display

import (
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"sync"
	"testing"

	"livefield/online"
)

// A probe's worth of simulated units for the page tests at scale: popN
// units named by channel ("ch07.2", four per channel), each a
// linear–nonlinear–Poisson cell of our own with a Gaussian field at a
// random place and a random strength (a quarter without any field), under
// binary ±1 noise on a small stimulus so that the mapping itself is cheap.
const (
	popN                   = 384
	popWidth, popHeight    = 12, 12
	popLags                = 4
	popBins                = 3000
	popChannels            = popN / 4
	popFieldlessEveryNth   = 4
	popTarget, popFraction = 0.6, 0.8
)

type popCell struct {
	id     string
	field  []float64 // height×width, unit norm; nil without a field
	base   float64   // spikes per bin at zero drive
	gain   float64
	x, y   float64
	unitIx int
}

var (
	popOnce sync.Once
	popSnap *online.Snapshot
	popMap  *online.Mapper
	popSet  []popCell
)

// population returns the snapshot of the simulated probe after popBins
// bins, computed once per test binary, and its cells.
func population(t testing.TB) (*online.Snapshot, *online.Mapper, []popCell) {
	popOnce.Do(func() {
		m, err := online.NewMapper(online.Config{Width: popWidth, Height: popHeight, Lags: popLags, White: true,
			PixelVariance: 1, Target: popTarget, Fraction: popFraction})
		if err != nil {
			t.Fatal(err)
		}
		rng := rand.New(rand.NewPCG(384, 1))
		cells := make([]popCell, popN)
		for i := range cells {
			b := rng.Float64()
			c := popCell{id: fmt.Sprintf("ch%02d.%d", i/4, i%4+1), base: 0.04 + 0.5*b*b}
			c.unitIx = m.Unit(c.id)
			if i%popFieldlessEveryNth != popFieldlessEveryNth-1 {
				c.x, c.y = 1.5+9*rng.Float64(), 1.5+9*rng.Float64()
				sigma := 0.8 + 1.2*rng.Float64()
				c.gain = 0.4 + 1.6*rng.Float64()
				if rng.IntN(2) == 0 {
					c.gain = -c.gain // dark-preferring
				}
				c.field = make([]float64, popWidth*popHeight)
				norm := 0.0
				for p := range c.field {
					dx, dy := float64(p%popWidth)-c.x, float64(p/popWidth)-c.y
					c.field[p] = math.Exp(-(dx*dx + dy*dy) / (2 * sigma * sigma))
					norm += c.field[p] * c.field[p]
				}
				for p := range c.field {
					c.field[p] /= math.Sqrt(norm)
				}
			}
			cells[i] = c
		}
		// The field acts one and two frames after it was shown.
		lagWeight := [popLags]float64{0, 1, 0.5, 0}
		hist := make([][]float64, popLags)
		for l := range hist {
			hist[l] = make([]float64, popWidth*popHeight)
		}
		counts := make([]online.Count, popN)
		for range popBins {
			frame := hist[popLags-1]
			copy(hist[1:], hist[:popLags-1])
			hist[0] = frame
			for p := range frame {
				frame[p] = float64(2*rng.IntN(2) - 1)
			}
			for i, c := range cells {
				drive := 0.0
				for l, w := range lagWeight {
					if w == 0 || c.field == nil {
						continue
					}
					for p, k := range c.field {
						drive += w * k * hist[l][p]
					}
				}
				counts[i] = online.Count{Unit: c.unitIx, N: float64(poisson(rng, c.base*math.Exp(c.gain*drive)))}
			}
			m.AddBin(frame, counts)
		}
		popSnap, popMap, popSet = m.Update(), m, cells
	})
	if popSnap == nil || len(popSnap.Units) != popN {
		t.Fatal("display: the simulated probe did not map")
	}
	return popSnap, popMap, popSet
}

func TestPopulationSim(t *testing.T) {
	s, _, _ := population(t)
	counts := map[online.Status]int{}
	for _, u := range s.Units {
		counts[u.Status]++
	}
	var rel []float64
	for _, u := range s.Units {
		if !math.IsNaN(float64(u.Reliability)) {
			rel = append(rel, float64(u.Reliability))
		}
	}
	slices.Sort(rel)
	t.Logf("statuses %v, summary %+v, reliability quantiles %.2f %.2f %.2f", counts, s.Summary, rel[len(rel)/2], rel[len(rel)*9/10], rel[len(rel)-1])
}
