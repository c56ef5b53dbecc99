package online

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat"

	"livefield/online/internal/lnp"
)

// TestPredictiveRDirect: PredictiveR from sufficient statistics against the
// held-out correlations computed bin by bin (gonum's stat.Correlation of
// the held-out counts with the other half's prediction, the half fit solved
// densely from the stored design), on a movie. The sufficient statistics
// take the held-out half's Gram matrix as its share of the whole; with
// interleaved 5 s chunks over 10 minutes (3 under -short) that costs at most 0.01.
func TestPredictiveRDirect(t *testing.T) {
	const W, H, L = 3, 3, 2
	P, D := W*H, W*H*L
	bins := 36000
	if !longChecks() {
		bins = 12000
	}
	rng := rand.New(rand.NewPCG(81, 82))
	cfg := Config{Width: W, Height: H, Lags: L}
	m, err := NewMapper(withoutPrior(cfg))
	if err != nil {
		t.Fatal(err)
	}
	stim := &lnp.Movie{W: W, H: H, A: 0.7, Rng: rng}
	var cells []*lnp.Unit
	for i, g := range []float64{0, 0.3, 0.6} {
		f := make([]float64, D)
		f[4] = g
		f[P+4] = -g / 2
		cells = append(cells, &lnp.Unit{Filter: f, Base: -1.5, Rng: rand.New(rand.NewPCG(83, uint64(i)))})
		m.Unit(fmt.Sprintf("g%g", g))
	}
	hist := lnp.NewLagged(P, L)
	frame := make([]float64, P)
	xs := mat.NewDense(bins, D, nil)
	ys := mat.NewDense(bins, len(cells), nil)
	halfA := make([]bool, bins)
	var counts []Count
	k := 0
	for k < bins {
		stim.Next(frame)
		hist.Push(frame)
		counts = counts[:0]
		if hist.Full() {
			hist.To(xs.RawRowView(k))
			for u, c := range cells {
				n := c.Next(xs.RawRowView(k))
				ys.Set(k, u, n)
				if n > 0 {
					counts = append(counts, Count{Unit: u, N: n})
				}
			}
			halfA[k] = int64(float64(k)*m.cfg.FramePeriod/m.cfg.ChunkSeconds)%2 == 0
			k++
		}
		if err := m.AddBin(frame, counts); err != nil {
			t.Fatal(err)
		}
	}
	s := m.Update()
	// Centred design and G + λI.
	xc := mat.DenseCopyOf(xs)
	for j := 0; j < D; j++ {
		col := mat.Col(nil, j, xc)
		mu := stat.Mean(col, nil)
		for i := range col {
			xc.Set(i, j, col[i]-mu)
		}
	}
	var g mat.Dense
	g.Mul(xc.T(), xc)
	for i := 0; i < D; i++ {
		g.Set(i, i, g.At(i, i)+m.cfg.Lambda)
	}
	for u := range cells {
		var r [2]float64
		for h, inA := range []bool{true, false} {
			// Fit on half h's counts centred within it (zero elsewhere).
			y := mat.Col(nil, u, ys)
			var sum, n float64
			for i, v := range y {
				if halfA[i] == inA {
					sum += v
					n++
				}
			}
			yc := make([]float64, bins)
			for i, v := range y {
				if halfA[i] == inA {
					yc[i] = v - sum/n
				}
			}
			var rhs, a mat.VecDense
			rhs.MulVec(xc.T(), mat.NewVecDense(bins, yc))
			if err := a.SolveVec(&g, &rhs); err != nil {
				t.Fatal(err)
			}
			var pred, held []float64
			for i := 0; i < bins; i++ {
				if halfA[i] != inA {
					pred = append(pred, mat.Dot(xs.RowView(i), &a))
					held = append(held, y[i])
				}
			}
			r[h] = stat.Correlation(pred, held, nil)
		}
		want := (r[0] + r[1]) / 2
		got := float64(s.Units[u].PredictiveR)
		t.Logf("%s: PredictiveR %.4f, bin by bin %.4f", s.Units[u].ID, got, want)
		if math.Abs(got-want) > 0.01 {
			t.Errorf("%s: PredictiveR %.4f, bin by bin %.4f", s.Units[u].ID, got, want)
		}
	}
}

// TestPredictiveRNull: without a field the held-out correlation centres on
// 0: over 300 Poisson null units at 60 s on white noise and on a movie the
// mean PredictiveR lies within 4 standard errors of 0 (each r has standard
// deviation near 1/sqrt(n/2), and the mean of two directions a little less).
func TestPredictiveRNull(t *testing.T) {
	for _, tc := range calibStimuli(84) {
		t.Run(tc.name, func(t *testing.T) {
			s := calibBlock(t, tc.cfg, tc.stim, 86, calibTrains[:1], 300, []int64{60 * 60})[0]
			var rs []float64
			for _, u := range s.Units {
				if r := float64(u.PredictiveR); !math.IsNaN(r) {
					rs = append(rs, r)
				}
			}
			mean, sd := stat.MeanStdDev(rs, nil)
			se := sd / math.Sqrt(float64(len(rs)))
			t.Logf("%d units: mean PredictiveR %.4f, sd %.4f (1/sqrt(n/2) = %.4f)", len(rs), mean, sd, 1/math.Sqrt(float64(s.Bins)/2))
			if len(rs) < 290 || math.Abs(mean) > 4*se {
				t.Errorf("mean PredictiveR %.4f over %d null units, want 0 ± %.4f", mean, len(rs), 4*se)
			}
		})
	}
}

// TestPredictiveRWhiteOnePass: on white noise PredictiveR takes C_A = y_A·a
// and C_B = y_B·b from the STA halves in one pass; it must equal, bit for
// bit, the formula of predict.go's comment written out with the scaled
// copies (r_{A→B} = C_Bᵀa / sqrt(aᵀG_B a · V_B), aᵀG_B a ≈ n_B c²|a|²).
func TestPredictiveRWhiteOnePass(t *testing.T) {
	const w, h, lags = 6, 6, 4
	cfg := Config{Width: w, Height: h, Lags: lags, White: true, PixelVariance: 1}
	cells := []lnpCell{{filter: gaborFilter(w, h, lags, 2, 3, 1.2, 0.4, 1), base: 0.2, gain: 0.8}}
	for k := range 11 { // null units, whose products round in many ways
		cells = append(cells, lnpCell{filter: make([]float64, w*h*lags), base: 0.05 + 0.05*float64(k)})
	}
	sim := newSimulation(t, cfg, cells, 17, binaryFrame)
	sim.run(40 * 60)
	m := sim.m
	D := m.dim
	a, b, ca, cb := make([]float64, D), make([]float64, D), make([]float64, D), make([]float64, D)
	na, nb := m.sta.HalfBins()
	n := float64(na + nb)
	for u := range m.ids {
		m.sta.HalvesTo(a, b, u)
		got := m.unitPredictiveR(u, a, b, ca, cb, true)
		ya, yb := m.sta.HalfSpikes(u)
		for i := range a {
			ca[i], cb[i] = a[i]*ya, b[i]*yb
		}
		va := m.cal.sumSq[u][0] - ya*ya/float64(na)
		vb := m.cal.sumSq[u][1] - yb*yb/float64(nb)
		gaa, gbb := n*cfg.PixelVariance*dot(a, a), n*cfg.PixelVariance*dot(b, b)
		rAB := dot(cb, a) / math.Sqrt(gaa*float64(nb)/n*vb)
		rBA := dot(ca, b) / math.Sqrt(gbb*float64(na)/n*va)
		want := (rAB + rBA) / 2
		if math.IsNaN(want) || math.Float64bits(got) != math.Float64bits(want) {
			t.Errorf("unit %d: PredictiveR %v, written out %v", u, got, want)
		}
	}
}
