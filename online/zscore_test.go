package online

import (
	"math"
	"math/rand/v2"
	"sync"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// TestSamplingDiagDense: the sampling variances per σ² equal the diagonal
// of M − λM², M = (X̃ᵀX̃ + λI)⁻¹ on the centred design, computed densely with
// gonum (an independent route through the same identity), to 1e-9 relative;
// and M·v (the drift test's whitening) equals the dense product. D = 200
// spreads the rows over more than one lane of the parallel pass.
func TestSamplingDiagDense(t *testing.T) {
	for _, size := range []struct{ n, d int }{{300, 20}, {600, 200}} {
		samplingDiagDense(t, size.n, size.d)
	}
}

func samplingDiagDense(t *testing.T, n, d int) {
	rng := rand.New(rand.NewPCG(61, 62))
	const lambda = 5.0
	r, err := NewRidge(d, 1, lambda)
	if err != nil {
		t.Fatal(err)
	}
	x := mat.NewDense(n, d, nil)
	y := []float64{0}
	for k := 0; k < n; k++ {
		row := x.RawRowView(k)
		for j := range row {
			row[j] = rng.NormFloat64() + 0.5*float64(j%3)
		}
		r.AddRow(row, y)
	}
	r.Flush()
	got := make([]float64, d)
	r.samplingDiagTo(got)
	for j := 0; j < d; j++ {
		col := mat.Col(nil, j, x)
		var mean float64
		for _, v := range col {
			mean += v / float64(n)
		}
		for k := range col {
			x.Set(k, j, col[k]-mean)
		}
	}
	var g mat.Dense
	g.Mul(x.T(), x)
	for i := 0; i < d; i++ {
		g.Set(i, i, g.At(i, i)+lambda)
	}
	var m, m2 mat.Dense
	if err := m.Inverse(&g); err != nil {
		t.Fatal(err)
	}
	m2.Mul(&m, &m)
	v := make([]float64, d)
	for i := range v {
		v[i] = rng.NormFloat64()
	}
	mv := make([]float64, d)
	r.weightsMulTo(mv, v)
	var want mat.VecDense
	want.MulVec(&m, mat.NewVecDense(d, v))
	for i := range mv {
		if math.Abs(mv[i]-want.AtVec(i)) > 1e-9*math.Abs(want.AtVec(i))+1e-12 {
			t.Errorf("M·v[%d] = %g, dense %g", i, mv[i], want.AtVec(i))
		}
	}
	for i := 0; i < d; i++ {
		want := m.At(i, i) - lambda*m2.At(i, i)
		if math.Abs(got[i]-want) > 1e-9*want {
			t.Errorf("coefficient %d: %g, dense %g", i, got[i], want)
		}
	}
}

// TestZNullMean: under the null the z of the ridge coefficients are
// standard normal, so the mean z² over units and coefficients is 1: Poisson
// null units on white noise and on a correlated movie, D = 144, at 20 s and
// 60 s. With 300 units the mean over 43 200 values (correlated within a unit)
// has a standard error near 0.01; the tolerance is ±0.06. The posterior
// standard deviation used before gives 0.3–0.5 and fails.
func TestZNullMean(t *testing.T) {
	for _, tc := range calibStimuli(63) {
		t.Run(tc.name, func(t *testing.T) {
			snaps := calibBlock(t, tc.cfg, tc.stim, 65, calibTrains[:1], 300, []int64{20 * 60, 60 * 60})
			for i, s := range snaps {
				var sum float64
				var n int
				for _, u := range s.Units {
					d, _ := s.Detail(u.ID)
					for _, z := range d.Z {
						sum += float64(z) * float64(z)
						n++
					}
				}
				mean := sum / float64(n)
				t.Logf("update %d (%g s): mean z² = %.3f over %d coefficients", i, float64(s.T), mean, n)
				if math.Abs(mean-1) > 0.06 {
					t.Errorf("%g s: mean z² = %.3f, want 1 ± 0.06", float64(s.T), mean)
				}
			}
		})
	}
}

// TestDetailZConcurrent: the z scores a snapshot computes when asked are the
// same on every call and from several goroutines at once (run under -race:
// Detail must not write the snapshot's shared state).
func TestDetailZConcurrent(t *testing.T) {
	m, err := NewMapper(Config{Width: 4, Height: 3, Lags: 2, White: true, PixelVariance: 1, NoPrior: true})
	if err != nil {
		t.Fatal(err)
	}
	defer m.Close()
	rng := rand.New(rand.NewPCG(5, 5))
	m.Unit("a")
	frame := make([]float64, 12)
	for range 2000 {
		for i := range frame {
			frame[i] = float64(rng.IntN(2)*2 - 1)
		}
		m.AddBin(frame, []Count{{Unit: 0, N: float64(rng.IntN(3))}})
	}
	s := m.Update()
	first, _ := s.Detail("a")
	if len(first.Z) != 24 {
		t.Fatalf("%d z scores, want 24", len(first.Z))
	}
	var wg sync.WaitGroup
	for range 4 {
		wg.Go(func() {
			d, _ := s.Detail("a")
			for i, z := range d.Z {
				if z != first.Z[i] {
					t.Errorf("z[%d] = %v, first call %v", i, z, first.Z[i])
				}
			}
		})
	}
	wg.Wait()
}
