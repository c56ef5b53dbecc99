package online

import (
	"math"
	"testing"
)

// TestPriorReusesM checks the reuse of M = K^½ E^½ G E^½ K^½ between
// evidence evaluations that change only the prior's scale: the evidence
// and posterior mean at a new scale equal those of a fresh problem, which
// forms M anew, and after a refit on other data (a Gram matrix of other
// frames, same bins, same hyperparameters and window) the evidence is that
// of the new data, not of M formed on the old. The reference for the
// evaluation itself is the numpy golden (TestPriorEvidenceGolden); here
// the fresh evaluation is the reference for the reused one.
func TestPriorReusesM(t *testing.T) {
	g := loadPriorGolden(t)
	v, cross, q := goldenStats(t, g)
	fixed := g.Fixed[0]
	p := goldenProblem(v, cross, q, g, fixed.Window)
	h := fixed.Hyper
	if _, err := p.evaluate(h, true); err != nil {
		t.Fatal(err)
	}
	formed := p.formed
	h2 := h
	h2.Scale *= 7
	got, err := p.evaluate(h2, true)
	if err != nil {
		t.Fatal(err)
	}
	if p.formed != formed {
		t.Errorf("a change of scale formed M again")
	}
	compare := func(what string, got evaluation, gotMu []float64, h SmoothLocal) {
		t.Helper()
		fresh := goldenProblem(v, cross, q, g, fixed.Window)
		want, err := fresh.evaluate(h, true)
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(got.logEv-want.logEv) > 1e-10*math.Abs(want.logEv) || math.Abs(got.noise-want.noise) > 1e-12*want.noise {
			t.Errorf("%s: log evidence %.15g, noise %.15g; fresh %.15g, %.15g", what, got.logEv, got.noise, want.logEv, want.noise)
		}
		for i := range gotMu {
			if math.Abs(gotMu[i]-fresh.mu[i]) > 1e-10*(math.Abs(fresh.mu[i])+1e-12) {
				t.Fatalf("%s: mean[%d] %.15g, fresh %.15g", what, i, gotMu[i], fresh.mu[i])
			}
		}
	}
	compare("reused M", got, p.mu, h2)
	// Any other change forms M anew.
	h3 := h2
	h3.Length[0] *= 1.5
	h3.Centre[2] += 0.5
	if got, err = p.evaluate(h3, true); err != nil {
		t.Fatal(err)
	}
	if p.formed != formed+1 {
		t.Errorf("a change of length and centre did not form M")
	}
	compare("M formed anew", got, p.mu, h3)

	// A refit on other data: the same frames with every other pixel's sign
	// flipped (another Gram matrix, the same bins), one evaluation only, at
	// the hyperparameters of the first fit.
	P := g.Width * g.Height
	lg, err := NewLagGram(P, g.Lags)
	if err != nil {
		t.Fatal(err)
	}
	for _, f := range g.Frames {
		flipped := append([]float64(nil), f...)
		for i := 0; i < P; i += 2 {
			flipped[i] = -flipped[i]
		}
		if err := lg.AddFrame(flipped); err != nil {
			t.Fatal(err)
		}
	}
	v2, err := lg.View()
	if err != nil {
		t.Fatal(err)
	}
	f, err := NewPriorFitter(g.Width, g.Height, g.Lags, PriorOptions{WindowPixels: 3, WindowLags: 2, Evaluations: 1})
	if err != nil {
		t.Fatal(err)
	}
	seed := make([]float64, P*g.Lags)
	copy(seed, cross)
	first, err := f.Refit(0, PriorStats{Gram: v, Cross: cross, YY: q, Seed: seed})
	if err != nil {
		t.Fatal(err)
	}
	// Each later refit makes its one evaluation at the same point: the
	// second on the new data, the third on the first data again, right
	// after an evaluation at that point on other data.
	for i, view := range []*GramView{v2, v} {
		fit, err := f.Refit(0, PriorStats{Gram: view, Cross: cross, YY: q})
		if err != nil {
			t.Fatal(err)
		}
		if fit.Evaluations != 1 || fit.Window != first.Window {
			t.Fatalf("refit %d: %d evaluations, window %+v (first %+v); want one evaluation in the same window", i+2, fit.Evaluations, fit.Window, first.Window)
		}
		w := fit.Window
		check := goldenProblem(view, cross, q, g, [6]int{w.X0, w.Y0, w.T0, w.NX, w.NY, w.NT})
		ev, err := check.evaluate(fit.Hyper, true)
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(fit.LogEvidence-ev.logEv) > 1e-10*math.Abs(ev.logEv) {
			t.Errorf("refit %d on other data: log evidence %.15g, a fresh evaluation on that data %.15g", i+2, fit.LogEvidence, ev.logEv)
		}
	}
}
