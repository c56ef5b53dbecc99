package online

import (
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"testing"

	"gonum.org/v1/gonum/mat"
)

type bayesGolden struct {
	Pixels int         `json:"pixels"`
	Lags   int         `json:"lags"`
	Frames [][]float64 `json:"frames"`
	Units  []struct {
		Y           []float64 `json:"y"`
		Alpha       float64   `json:"alpha"`  // scikit-learn: noise precision β
		Lambda      float64   `json:"lambda"` // scikit-learn: weight precision α
		Coef        []float64 `json:"coef"`
		Intercept   float64   `json:"intercept"`
		LogEvidence float64   `json:"log_evidence"`
	} `json:"units"`
}

// evidenceInputs forms the centred Gram through LagGram and each unit's
// centred cross-correlation and sum of squares.
func evidenceInputs(t *testing.T, gd *bayesGolden) (*LagGram, *mat.SymDense, *mat.Dense, []float64, []float64) {
	t.Helper()
	g, err := NewLagGram(gd.Pixels, gd.Lags)
	if err != nil {
		t.Fatal(err)
	}
	for _, f := range gd.Frames {
		if err := g.AddFrame(f); err != nil {
			t.Fatal(err)
		}
	}
	var gram mat.SymDense
	if err := g.GramTo(&gram, true); err != nil {
		t.Fatal(err)
	}
	x := laggedDesign(gd.Frames, gd.Lags)
	mean := make([]float64, g.Dim())
	g.MeanTo(mean)
	cross := mat.NewDense(g.Dim(), len(gd.Units), nil)
	yy := make([]float64, len(gd.Units))
	for u, unit := range gd.Units {
		var ybar float64
		for _, v := range unit.Y {
			ybar += v
		}
		ybar /= float64(len(unit.Y))
		yc := make([]float64, len(unit.Y))
		for k, v := range unit.Y {
			yc[k] = v - ybar
			yy[u] += yc[k] * yc[k]
		}
		var c mat.VecDense
		c.MulVec(x.T(), mat.NewVecDense(len(yc), yc)) // Xᵀ(y−ȳ) = X̃ᵀ(y−ȳ)
		cross.SetCol(u, c.RawVector().Data)
	}
	return g, &gram, cross, yy, mean
}

func loadBayes(t *testing.T) *bayesGolden {
	raw, err := os.ReadFile("../testdata/golden/bayes_golden.json")
	if err != nil {
		t.Fatal(err)
	}
	var gd bayesGolden
	if err := json.Unmarshal(raw, &gd); err != nil {
		t.Fatal(err)
	}
	return &gd
}

func TestEvidenceGolden(t *testing.T) {
	// Reference: scikit-learn BayesianRidge(fit_intercept=True, flat
	// hyperpriors, tol=1e-13) from testdata/golden/bayes_golden.py. Its
	// alpha_ is our Beta, its lambda_ our Alpha. Tolerance 1e-8 relative
	// (scikit-learn stops when Σ|Δcoef| < 1e-13).
	gd := loadBayes(t)
	g, gram, cross, yy, mean := evidenceInputs(t, gd)
	basis, err := NewEvidenceBasis(gram, g.Bins())
	if err != nil {
		t.Fatal(err)
	}
	close := func(got, want float64) bool { return math.Abs(got-want) <= 1e-8*math.Max(1, math.Abs(want)) }
	col := make([]float64, g.Dim())
	m := make([]float64, g.Dim())
	for u, want := range gd.Units {
		mat.Col(col, u, cross)
		fit, err := basis.Fit(col, yy[u])
		if err != nil {
			t.Fatal(err)
		}
		if !fit.Converged {
			t.Errorf("unit %d: not converged after %d iterations", u, fit.Iterations)
		}
		if !close(fit.Beta, want.Alpha) || !close(fit.Alpha, want.Lambda) {
			t.Errorf("unit %d: β %.12g α %.12g, scikit-learn alpha_ %.12g lambda_ %.12g", u, fit.Beta, fit.Alpha, want.Alpha, want.Lambda)
		}
		if !close(fit.Lambda, want.Lambda/want.Alpha) {
			t.Errorf("unit %d: λ %.12g, want %.12g", u, fit.Lambda, want.Lambda/want.Alpha)
		}
		if !close(fit.LogEvidence, want.LogEvidence) {
			t.Errorf("unit %d: log evidence %.12g, scikit-learn score %.12g", u, fit.LogEvidence, want.LogEvidence)
		}
		if err := basis.PosteriorMeanTo(m, col, fit.Lambda); err != nil {
			t.Fatal(err)
		}
		b := 0.0
		for i, w := range want.Coef {
			if !close(m[i], w) {
				t.Errorf("unit %d coef %d: %.12g, scikit-learn %.12g", u, i, m[i], w)
			}
			b += mean[i] * m[i]
		}
		var ybar float64
		for _, v := range want.Y {
			ybar += v
		}
		ybar /= float64(len(want.Y))
		if !close(ybar-b, want.Intercept) {
			t.Errorf("unit %d intercept %.12g, scikit-learn %.12g", u, ybar-b, want.Intercept)
		}
	}
}

func TestEvidenceShared(t *testing.T) {
	gd := loadBayes(t)
	g, gram, cross, yy, _ := evidenceInputs(t, gd)
	lambdas, shared, err := Evidence(gram, cross, yy, g.Bins())
	if err != nil {
		t.Fatal(err)
	}
	lo, hi := math.Inf(1), 0.0
	for _, l := range lambdas {
		lo, hi = min(lo, l), max(hi, l)
	}
	if !(shared >= lo && shared <= hi) {
		t.Errorf("shared λ %v outside the units' range [%v, %v]", shared, lo, hi)
	}
	// The shared λ is a maximum of the summed profile log evidence.
	basis, _ := NewEvidenceBasis(gram, g.Bins())
	var z2 [][]float64
	col := make([]float64, g.Dim())
	for u := range yy {
		mat.Col(col, u, cross)
		basis.project(col)
		z2 = append(z2, append([]float64(nil), basis.zt...))
	}
	at := basis.profile(z2, yy, shared)
	for _, f := range []float64{0.99, 1.01} {
		if v := basis.profile(z2, yy, shared*f); v > at {
			t.Errorf("summed log evidence %v at %v·shared exceeds %v at shared", v, f, at)
		}
	}
	// With one unit the shared λ is that unit's own fixed point (the profile
	// over β is the same likelihood). Tolerance: near its maximum the profile
	// is flat to second order, so a round-off of 1e-13 in its value moves the
	// maximiser by about 1e-7 relative.
	for u := range yy {
		one, s1, err := Evidence(gram, cross.Slice(0, g.Dim(), u, u+1), yy[u:u+1], g.Bins())
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(s1-one[0]) > 2e-6*one[0] {
			t.Errorf("unit %d alone: shared %.10g, own %.10g", u, s1, one[0])
		}
	}
}

func TestEvidenceErrors(t *testing.T) {
	gram := mat.NewSymDense(2, []float64{2, 0, 0, 3})
	cases := []struct {
		name  string
		cross mat.Matrix
		yy    []float64
		bins  int
	}{
		{"one bin", mat.NewDense(2, 1, nil), []float64{1}, 1},
		{"cross rows", mat.NewDense(3, 1, nil), []float64{1}, 10},
		{"yy count", mat.NewDense(2, 2, nil), []float64{1}, 10},
		{"yy NaN", mat.NewDense(2, 1, nil), []float64{math.NaN()}, 10},
	}
	for _, c := range cases {
		if _, _, err := Evidence(gram, c.cross, c.yy, c.bins); err == nil {
			t.Errorf("%s: no error", c.name)
		}
	}
	// A unit without spikes is skipped, not an error.
	l, _, err := Evidence(gram, mat.NewDense(2, 1, nil), []float64{0}, 10)
	if err != nil || !math.IsNaN(l[0]) {
		t.Errorf("silent unit: λ %v, err %v; want NaN, nil", l, err)
	}
}

// BenchmarkEvidence times the shared eigendecomposition and the fits of
// all units (Dim = side²·lags, 64 units) on binary noise.
func BenchmarkEvidence(b *testing.B) {
	for _, s := range []struct{ side, lags, frames int }{{8, 3, 4000}, {16, 3, 8000}, {16, 12, 30000}} {
		b.Run(fmt.Sprintf("D=%d", s.side*s.side*s.lags), func(b *testing.B) {
			r := rand.New(rand.NewPCG(5, 5))
			p := s.side * s.side
			g, _ := NewLagGram(p, s.lags)
			f := make([]float64, p)
			for range s.frames {
				for i := range f {
					f[i] = float64(2*r.IntN(2) - 1)
				}
				g.AddFrame(f)
			}
			var gram mat.SymDense
			g.GramTo(&gram, true)
			const units = 64
			d := g.Dim()
			cross := mat.NewDense(d, units, nil)
			yy := make([]float64, units)
			for u := range units {
				for i := range d {
					cross.Set(i, u, 20*r.NormFloat64()+float64(i%7)*float64(u%3))
				}
				yy[u] = float64(g.Bins())
			}
			b.ReportAllocs()
			for b.Loop() {
				if _, _, err := Evidence(&gram, cross, yy, g.Bins()); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}
