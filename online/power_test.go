package online

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"livefield/online/internal/lnp"
)

// TestPowerAndNoField: LNP units (Chichilnisky 2001) whose linear drive has
// variance e = Config.SmallestField, beside Poisson null units of the same
// mean rate, on white noise and on a correlated movie (D = 144). The power
// rule (power.go) states the spike count N90 at which such a field is
// detected with probability 0.9. Checks:
//   - by N90 spikes at least the binomial 99.9 % lower bound of 90 % of the
//     field units are significant (the rule is not optimistic), and by N90/2
//     (the look before) fewer than 90 % are: 90 % of the fields appear
//     between N90/2 and N90 (the margin: the looks double the spike count,
//     so the rule cannot be finer than a factor 2);
//   - no field unit is ever called "no field" before it is significant in
//     more than the binomial upper bound of 10 %;
//   - null units are "collecting" until N90 and "no field" after it.
func TestPowerAndNoField(t *testing.T) {
	const P, L, units = 36, 4, 60
	const e = 0.16
	for _, tc := range []struct {
		name string
		cfg  Config
		stim lnp.Stimulus
	}{
		{"white", Config{Width: 6, Height: 6, Lags: L, White: true, PixelVariance: 0.25, SmallestField: e},
			&lnp.White{C: 0.5, Rng: rand.New(rand.NewPCG(51, 1))}},
		{"movie", Config{Width: 6, Height: 6, Lags: L, SmallestField: e},
			&lnp.Movie{W: 6, H: 6, A: 0.7, Rng: rand.New(rand.NewPCG(52, 1))}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			if tc.name == "movie" && !longChecks() {
				t.Skip("runs without -short and -race")
			}
			rng := rand.New(rand.NewPCG(53, 2))
			m, err := NewMapper(withoutPrior(tc.cfg))
			if err != nil {
				t.Fatal(err)
			}
			const base = -1.6 // about 0.2 spikes per bin
			var cells []*lnp.Unit
			var nulls []lnp.Train
			for i := 0; i < units; i++ {
				m.Unit(fmt.Sprintf("field-%d", i))
				cells = append(cells, &lnp.Unit{Filter: powerFilter(rng, P, L, e, tc.stim), Base: base - e/2,
					Rng: rand.New(rand.NewPCG(54, uint64(i)))})
			}
			for i := 0; i < units; i++ {
				m.Unit(fmt.Sprintf("null-%d", i))
				nulls = append(nulls, &lnp.PoissonTrain{Mu: math.Exp(base), Rng: rand.New(rand.NewPCG(55, uint64(i)))})
			}
			n90 := DetectionSpikes(m.Config().Alpha, e, P*L, SpikeCorrelation{1, 1}, 1)
			t.Logf("N90 = %g spikes at D = %d, e = %g, α = %g", n90, P*L, e, m.Config().Alpha)
			frame := make([]float64, P)
			x := make([]float64, P*L)
			hist := lnp.NewLagged(P, L)
			var counts []Count
			noFieldEarly := 0
			nullCollecting, nullNoField := true, true
			seenLate := false
			for k := 0; ; k++ {
				tc.stim.Next(frame)
				hist.Push(frame)
				counts = counts[:0]
				if hist.Full() {
					hist.To(x)
					for u, c := range cells {
						if n := c.Next(x); n > 0 {
							counts = append(counts, Count{Unit: u, N: n})
						}
					}
				}
				for u, tr := range nulls {
					if n := tr.Next(); n > 0 {
						counts = append(counts, Count{Unit: units + u, N: n})
					}
				}
				if err := m.AddBin(frame, counts); err != nil {
					t.Fatal(err)
				}
				if k%60 != 59 {
					continue
				}
				s := m.Update()
				done := true
				for _, u := range s.Units {
					if u.ID[0] == 'f' {
						if u.Status == NoField {
							noFieldEarly++
						}
						continue
					}
					sp := float64(u.Spikes)
					if sp < n90*1.3 {
						done = false
					}
					if sp < n90 && u.Status != Collecting && u.Status != Emerging {
						nullCollecting = false
					}
					if sp >= n90*1.01 && float64(u.NoFieldSpikes) <= sp {
						seenLate = true
						if u.Status != NoField && u.Status != Emerging {
							nullNoField = false
						}
					}
				}
				if done {
					break
				}
			}
			s := m.Snapshot()
			var by90, byHalf, byQuarter int
			for _, u := range s.Units[:units] {
				at := float64(u.SignificantAtSpikes)
				// The look due at N90 is taken at the first update after
				// (one second, about 12 spikes, later).
				if at > 0 && at <= 1.05*n90 {
					by90++
				}
				if at > 0 && at <= 1.05*n90/2 {
					byHalf++
				}
				if at > 0 && at <= 1.05*n90/4 {
					byQuarter++
				}
			}
			lo := binomialLower(units, 0.9)
			t.Logf("field units significant by N90: %d of %d (want ≥ %d); by N90/2: %d; by N90/4: %d field units ever 'no field': %d",
				by90, units, lo, byHalf, byQuarter, noFieldEarly)
			if by90 < lo {
				t.Errorf("%d of %d field units significant by N90 = %g spikes, want ≥ %d", by90, units, n90, lo)
			}
			if float64(byHalf) >= 0.9*units {
				t.Errorf("%d of %d field units significant by N90/2: the stated count is too high", byHalf, units)
			}
			if noFieldEarly > binomialUpper(units, 0.1) {
				t.Errorf("field units called 'no field' %d times", noFieldEarly)
			}
			if !nullCollecting || !nullNoField || !seenLate {
				t.Errorf("null units: collecting before N90 %v, no field after %v (seen %v)", nullCollecting, nullNoField, seenLate)
			}
		})
	}
}

// powerFilter is a random smooth filter (a Gaussian blob at lag 1 with a
// weaker opposite lobe at lag 2) scaled so that its drive k·x has variance
// e under the stimulus: e = c²|k|² for white noise, kᵀΓk for the movie,
// computed from the movie's own frames.
func powerFilter(rng *rand.Rand, P, L int, e float64, stim lnp.Stimulus) []float64 {
	k := make([]float64, P*L)
	cx, cy := 1.5+3*rng.Float64(), 1.5+3*rng.Float64()
	for p := 0; p < P; p++ {
		dx, dy := float64(p%6)-cx, float64(p/6)-cy
		g := math.Exp(-(dx*dx + dy*dy) / 2)
		k[P+p] = g
		k[2*P+p] = -0.5 * g
	}
	// Var(k·x) = c²|k|² on white noise; from 20000 draws of the movie's
	// lagged frames otherwise.
	var stimCopy lnp.Stimulus
	switch s := stim.(type) {
	case *lnp.White:
		f := math.Sqrt(e / (s.C * s.C * dot(k, k)))
		for i := range k {
			k[i] *= f
		}
		return k
	case *lnp.Movie:
		stimCopy = &lnp.Movie{W: s.W, H: s.H, A: s.A, Rng: rand.New(rand.NewPCG(9, 9))}
	}
	frame := make([]float64, P)
	x := make([]float64, P*L)
	h := lnp.NewLagged(P, L)
	var s1, s2 float64
	const draws = 20000
	for i := 0; i < draws+L; i++ {
		stimCopy.Next(frame)
		h.Push(frame)
		if !h.Full() {
			continue
		}
		h.To(x)
		v := dot(k, x)
		s1 += v
		s2 += v * v
	}
	n := float64(draws + 1)
	v := s2/n - (s1/n)*(s1/n)
	f := math.Sqrt(e / v)
	for i := range k {
		k[i] *= f
	}
	return k
}
