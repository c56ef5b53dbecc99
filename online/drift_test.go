package online

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"livefield/online/internal/lnp"
)

// TestDrift: on white noise and on a movie (8×8 pixels, 4 lags), LNP units whose Gaussian
// field (σ = 1 pixel, at lags 1–2) moves steadily by one field width (2σ)
// over a 10-minute block (under -short and -race: by 3σ over 6 minutes, 20 units of each kind), and still units with the same fields. At α = 0.05
// the still units ever flagged must stay within the binomial 99.9 % upper
// bound for α (the look schedule's promise), and at least 80 % of the
// moving units must be flagged, with the reported centres moving in the
// direction of the drift.
func TestDrift(t *testing.T) {
	t.Run("white", func(t *testing.T) {
		driftCheck(t, Config{Width: 8, Height: 8, Lags: 4, White: true, PixelVariance: 0.25, Alpha: 0.05},
			&lnp.White{C: 0.5, Rng: rand.New(rand.NewPCG(101, 102))}, 0.9)
	})
	t.Run("movie", func(t *testing.T) {
		if !longChecks() {
			t.Skip("a 10-minute block: runs without -short and -race")
		}
		driftCheck(t, Config{Width: 8, Height: 8, Lags: 4, Alpha: 0.05},
			&lnp.Movie{W: 8, H: 8, A: 0.7, Rng: rand.New(rand.NewPCG(101, 103))}, 0.2)
	})
}

func driftCheck(t *testing.T, cfg Config, stim lnp.Stimulus, gain float64) {
	const W, H, L = 8, 8, 4
	P := W * H
	units, minutes, shift := 40, 10, 2.0
	if !longChecks() {
		units, minutes, shift = 20, 6, 3.0
	}
	m, err := NewMapper(withoutPrior(cfg))
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(101, 104))
	type cell struct {
		x0, y0, dx float64
		u          *lnp.Unit
	}
	var cells []cell
	for i := 0; i < 2*units; i++ {
		c := cell{x0: 2.5 + 2*rng.Float64(), y0: 2.5 + 3*rng.Float64()}
		name := "still"
		if i < units {
			c.dx, name = shift, "moving"
		}
		c.u = &lnp.Unit{Filter: make([]float64, P*L), Base: -2, Rng: rand.New(rand.NewPCG(103, uint64(i)))}
		cells = append(cells, c)
		m.Unit(fmt.Sprintf("%s-%d", name, i))
	}
	bins := minutes * 60 * 60
	setFilter := func(c *cell, frac float64) {
		cx := c.x0 + c.dx*(frac-0.5)
		for p := 0; p < P; p++ {
			dx, dy := float64(p%W)-cx, float64(p/W)-c.y0
			g := gain * math.Exp(-(dx*dx+dy*dy)/2)
			c.u.Filter[P+p] = g
			c.u.Filter[2*P+p] = 0.5 * g
		}
	}
	hist := lnp.NewLagged(P, L)
	frame := make([]float64, P)
	x := make([]float64, P*L)
	var counts []Count
	everStill := map[string]bool{}
	for k := 0; k < bins; k++ {
		if k%600 == 0 {
			for i := range cells {
				setFilter(&cells[i], float64(k)/float64(bins))
			}
		}
		stim.Next(frame)
		hist.Push(frame)
		counts = counts[:0]
		if hist.Full() {
			hist.To(x)
			for u, c := range cells {
				if n := c.u.Next(x); n > 0 {
					counts = append(counts, Count{Unit: u, N: n})
				}
			}
		}
		if err := m.AddBin(frame, counts); err != nil {
			t.Fatal(err)
		}
		if k%60 == 59 {
			s := m.Update()
			for _, u := range s.Units[units:] {
				if u.Drift {
					everStill[u.ID] = true
				}
			}
		}
	}
	s := m.Snapshot()
	moved, rightWay := 0, 0
	for _, u := range s.Units[:units] {
		if u.Drift {
			moved++
			if float64(u.DriftTo[0]-u.DriftFrom[0]) > 0 {
				rightWay++
			}
		}
	}
	hi := binomialUpper(units, cfg.Alpha)
	t.Logf("moving units flagged: %d of %d (%d moving right); still units ever flagged: %d of %d (bound %d); block summary drifting = %d",
		moved, units, rightWay, len(everStill), units, hi, s.Summary.Drifting)
	if float64(moved) < 0.8*float64(units) {
		t.Errorf("%d of %d moving units flagged, want ≥ 80 %%", moved, units)
	}
	if float64(rightWay) < 0.8*float64(moved) {
		t.Errorf("%d of %d flagged units moved the right way", rightWay, moved)
	}
	if len(everStill) > hi {
		t.Errorf("%d of %d still units ever flagged, want ≤ %d", len(everStill), units, hi)
	}
	if s.Summary.Drifting < moved {
		t.Errorf("block summary counts %d drifting units, %d moving units are flagged", s.Summary.Drifting, moved)
	}
}

// TestDriftNullLooks: on white noise and on a movie, the drift comparison's p-values at each look, for
// units whose spikes do not depend on the stimulus at all (Poisson and
// 3-bin bursts; the comparison forced on), are uniform: the share below
// 0.05 and 0.01 lies within the binomial 99.9 % bounds (looks of one unit
// are independent under this null: disjoint segments).
func TestDriftNullLooks(t *testing.T) {
	t.Run("white", func(t *testing.T) {
		driftNullLooks(t, Config{Width: 8, Height: 8, Lags: 4, White: true, PixelVariance: 0.25},
			&lnp.White{C: 0.5, Rng: rand.New(rand.NewPCG(111, 112))})
	})
	t.Run("movie", func(t *testing.T) {
		driftNullLooks(t, Config{Width: 8, Height: 8, Lags: 4},
			&lnp.Movie{W: 8, H: 8, A: 0.7, Rng: rand.New(rand.NewPCG(111, 113))})
	})
}

func driftNullLooks(t *testing.T, cfg Config, stim lnp.Stimulus) {
	const W, H, L = 8, 8, 4
	P := W * H
	units := 200
	if !longChecks() {
		units = 100
	}
	m, err := NewMapper(withoutPrior(cfg))
	if err != nil {
		t.Fatal(err)
	}
	var trains []lnp.Train
	for i := 0; i < units; i++ {
		m.Unit(fmt.Sprintf("u%d", i))
		r := rand.New(rand.NewPCG(113, uint64(i)))
		if i%2 == 0 {
			trains = append(trains, &lnp.PoissonTrain{Mu: 0.1, Rng: r})
		} else {
			trains = append(trains, &lnp.BurstTrain{Onset: 0.1 / 3, Span: 3, Mu: 1, Rng: r})
		}
	}
	frame := make([]float64, P)
	var counts []Count
	var ps []float64
	s := m.newScratch()
	bins := 20000
	if !longChecks() {
		bins = 8000
	}
	for k := 0; k < bins; k++ {
		counts = nullBin(t, m, stim, frame, trains, counts)
		if k%60 != 59 {
			continue
		}
		m.sta.CacheMeans()
		m.ridge.Flush()
		sh := &ridgeCommon{}
		sh.t1, sh.t2 = m.ridge.HatTraces()
		sh.lag = m.cal.shared(L, m.used, m.cfg.Lambda, m.ridge)
		for u := 0; u < units; u++ {
			d := &UnitDetail{}
			before := m.cal.drift[u].look
			m.checkDrift(d, u, true, P, 4*P, sh, s)
			if m.cal.drift[u].look > before && before > 0 {
				ps = append(ps, float64(d.DriftP))
			}
		}
	}
	for _, alpha := range []float64{0.05, 0.01} {
		h := 0
		for _, p := range ps {
			if p < alpha {
				h++
			}
		}
		lo, hi := binomialLower(len(ps), alpha), binomialUpper(len(ps), alpha)
		t.Logf("α = %g: %d of %d looks with p < α (bound %d…%d)", alpha, h, len(ps), lo, hi)
		if h < lo || h > hi {
			t.Errorf("α = %g: %d of %d looks with p < α, want %d…%d", alpha, h, len(ps), lo, hi)
		}
	}
}
