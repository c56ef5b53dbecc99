package online

import (
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// priorGolden is testdata/golden/prior_golden.json, written by
// testdata/golden/prior_golden.py: a dense numpy/scipy implementation of the
// smooth-local prior's evidence from the formulas of Sahani & Linden (2003)
// and Park & Pillow (2011), checked there against the brute-force Gaussian
// marginal likelihood of the centred responses.
type priorGolden struct {
	Width, Height, Lags int
	Frames              [][]float64
	Counts              []float64
	Fixed               []struct {
		Name               string
		Window             [6]int
		Hyper              SmoothLocal
		LogEvidence        float64 `json:"log_evidence"`
		ProfileLogEvidence float64 `json:"profile_log_evidence"`
		ProfileNoise       float64 `json:"profile_noise"`
		Mean               []float64
	}
	Optimum struct {
		Window [6]int
		Start  []float64
		Optima []struct { // best first
			Theta       []float64
			LogEvidence float64 `json:"log_evidence"`
			Noise       float64
			Mean        []float64
		}
	}
}

func loadPriorGolden(t *testing.T) priorGolden {
	t.Helper()
	b, err := os.ReadFile(filepath.Join("..", "testdata", "golden", "prior_golden.json"))
	if err != nil {
		t.Fatal(err)
	}
	var g priorGolden
	if err := json.Unmarshal(b, &g); err != nil {
		t.Fatal(err)
	}
	return g
}

// goldenStats feeds the golden frames to a LagGram and forms the centred
// cross-correlation and sum of squares of the counts directly from the
// lagged frames.
func goldenStats(t *testing.T, g priorGolden) (*GramView, []float64, float64) {
	t.Helper()
	P := g.Width * g.Height
	lg, err := NewLagGram(P, g.Lags)
	if err != nil {
		t.Fatal(err)
	}
	for _, f := range g.Frames {
		if err := lg.AddFrame(f); err != nil {
			t.Fatal(err)
		}
	}
	v, err := lg.View()
	if err != nil {
		t.Fatal(err)
	}
	if v.Bins() != len(g.Counts) {
		t.Fatalf("%d bins, %d counts", v.Bins(), len(g.Counts))
	}
	d := P * g.Lags
	var ySum float64
	for _, y := range g.Counts {
		ySum += y
	}
	yBar := ySum / float64(len(g.Counts))
	cross := make([]float64, d)
	var q float64
	for k, y := range g.Counts {
		bin := k + g.Lags - 1
		for lag := range g.Lags {
			for p, s := range g.Frames[bin-lag] {
				cross[lag*P+p] += (y - yBar) * s
			}
		}
		q += (y - yBar) * (y - yBar)
	}
	return v, cross, q
}

func goldenProblem(v *GramView, cross []float64, q float64, g priorGolden, win [6]int) *priorProblem {
	w := PriorWindow{X0: win[0], Y0: win[1], T0: win[2], NX: win[3], NY: win[4], NT: win[5]}
	p := newPriorProblem(w)
	idx := w.Indices(g.Width, g.Height)
	if err := v.WindowTo(p.gram, idx); err != nil {
		panic(err)
	}
	for i, a := range idx {
		p.c[i] = cross[a]
	}
	p.q, p.n = q, v.Bins()
	return p
}

// TestPriorEvidenceGolden checks the log evidence and the posterior mean at
// fixed hyperparameters against the dense numpy reference
// (testdata/golden/prior_golden.py), to 1e-8 relative.
func TestPriorEvidenceGolden(t *testing.T) {
	g := loadPriorGolden(t)
	v, cross, q := goldenStats(t, g)
	for _, c := range g.Fixed {
		t.Run(c.Name, func(t *testing.T) {
			p := goldenProblem(v, cross, q, g, c.Window)
			ev, err := p.evaluate(c.Hyper, false)
			if err != nil {
				t.Fatal(err)
			}
			if rel := math.Abs(ev.logEv-c.LogEvidence) / math.Abs(c.LogEvidence); rel > 1e-8 {
				t.Errorf("log evidence %.12g, numpy %.12g (relative %.2g)", ev.logEv, c.LogEvidence, rel)
			}
			var scale float64
			for _, m := range c.Mean {
				scale = max(scale, math.Abs(m))
			}
			for i, m := range c.Mean {
				if math.Abs(p.mu[i]-m) > 1e-8*scale {
					t.Fatalf("mean[%d] = %.12g, numpy %.12g", i, p.mu[i], m)
				}
			}
			ev, err = p.evaluate(c.Hyper, true)
			if err != nil {
				t.Fatal(err)
			}
			if rel := math.Abs(ev.logEv-c.ProfileLogEvidence) / math.Abs(c.ProfileLogEvidence); rel > 1e-8 {
				t.Errorf("profile log evidence %.12g, numpy %.12g (relative %.2g)", ev.logEv, c.ProfileLogEvidence, rel)
			}
			if rel := math.Abs(ev.noise-c.ProfileNoise) / c.ProfileNoise; rel > 1e-8 {
				t.Errorf("profile noise %.12g, numpy %.12g", ev.noise, c.ProfileNoise)
			}
		})
	}
}

// TestPriorOptimumGolden runs a first fit (the coarse grid, then the
// compass search to its stopping rule) and compares with the local maxima
// of the same profile evidence that scipy's L-BFGS-B reaches, within the
// same bounds, from every point of the grid (the reference script repeats
// the grid). The evidence of these priors is multimodal; the search must
// end on one of scipy's maxima: the evidence within 0.01 nats (what the
// stopping rule, steps of 1/64 of the initial ones, leaves on this data),
// the hyperparameters within 0.1 in log a, log lengths and log widths and
// 0.05 pixel or lag in the centre, and the posterior means at a
// correlation above 0.9999. The gap to the best maximum is logged.
func TestPriorOptimumGolden(t *testing.T) {
	g := loadPriorGolden(t)
	v, cross, q := goldenStats(t, g)
	o := g.Optimum
	p := goldenProblem(v, cross, q, g, o.Window)
	lo, hi := thetaBounds(p.win)
	obj := func(th [thetaDim]float64) (float64, bool) {
		ev, err := p.evaluate(hyperOf(th), true)
		return ev.logEv, err == nil
	}
	f, err := NewPriorFitter(g.Width, g.Height, g.Lags, PriorOptions{})
	if err != nil {
		t.Fatal(err)
	}
	start, n, ok := f.grid(p, [3]float64{o.Start[4], o.Start[5], o.Start[6]}, obj, lo, hi)
	if !ok {
		t.Fatal("grid found no usable point")
	}
	c := newCompass(start.theta)
	c.best = start.value
	n += c.run(obj, lo, hi, 5000)
	if !c.converged() {
		t.Fatalf("no convergence after %d evaluations", n)
	}
	near := o.Optima[0]
	for _, m := range o.Optima {
		if math.Abs(m.LogEvidence-c.best) < math.Abs(near.LogEvidence-c.best) {
			near = m
		}
	}
	t.Logf("%d evaluations; log evidence %.8g, scipy's nearest maximum %.8g, its best %.8g (%.3g nats higher)",
		n, c.best, near.LogEvidence, o.Optima[0].LogEvidence, o.Optima[0].LogEvidence-c.best)
	if d := near.LogEvidence - c.best; math.Abs(d) > 0.01 {
		t.Errorf("log evidence at the optimum %.10g, scipy's nearest maximum %.10g (%.2g nats apart)", c.best, near.LogEvidence, d)
	}
	for i, v := range c.theta {
		tol := 0.1
		if i >= 4 && i < 7 {
			tol = 0.05
		}
		if math.Abs(v-near.Theta[i]) > tol {
			t.Errorf("θ[%d] = %.4g, scipy %.4g", i, v, near.Theta[i])
		}
	}
	if _, err := p.evaluate(hyperOf(c.theta), true); err != nil {
		t.Fatal(err)
	}
	if r := priorCorr(p.mu, near.Mean); r < 0.9999 {
		t.Errorf("posterior mean at the optimum: correlation %.6f with scipy's", r)
	}
}

// priorCorr is Pearson's correlation of two equal-length vectors.
func priorCorr(a, b []float64) float64 {
	var ma, mb float64
	for i := range a {
		ma += a[i]
		mb += b[i]
	}
	ma /= float64(len(a))
	mb /= float64(len(b))
	var sab, saa, sbb float64
	for i := range a {
		sab += (a[i] - ma) * (b[i] - mb)
		saa += (a[i] - ma) * (a[i] - ma)
		sbb += (b[i] - mb) * (b[i] - mb)
	}
	return sab / math.Sqrt(saa*sbb)
}

// TestGramViewWindow checks the window Gram formed from the lag
// cross-products against GramTo's full centred Gram matrix.
func TestGramViewWindow(t *testing.T) {
	g := loadPriorGolden(t)
	v, _, _ := goldenStats(t, g)
	w := PriorWindow{X0: 1, Y0: 2, T0: 1, NX: 3, NY: 2, NT: 3}
	idx := w.Indices(g.Width, g.Height)
	got := make([]float64, len(idx)*len(idx))
	if err := v.WindowTo(got, idx); err != nil {
		t.Fatal(err)
	}
	lg, _ := NewLagGram(g.Width*g.Height, g.Lags)
	for _, f := range g.Frames {
		_ = lg.AddFrame(f)
	}
	var full mat.SymDense
	if err := lg.GramTo(&full, true); err != nil {
		t.Fatal(err)
	}
	for r, a := range idx {
		for c, b := range idx {
			if want := full.At(a, b); math.Abs(got[r*len(idx)+c]-want) > 1e-9*math.Abs(want)+1e-9 {
				t.Fatalf("entry (%d, %d) = %.12g, GramTo %.12g", a, b, got[r*len(idx)+c], want)
			}
		}
	}
}
