package online

import (
	"errors"
	"math"
	"testing"

	"gonum.org/v1/gonum/mat"
)

func smallSimulation(t *testing.T, seconds int) *simulation {
	return runSmall(t, seconds, false)
}

func smallSimulationRecorded(t *testing.T, seconds int) *simulation {
	return runSmall(t, seconds, true)
}

func runSmall(t *testing.T, seconds int, record bool) *simulation {
	const w, h, lags = 6, 6, 4
	cfg := Config{Width: w, Height: h, Lags: lags, White: true, PixelVariance: 1, Lambda: 20}
	cells := []lnpCell{
		{filter: gaborFilter(w, h, lags, 2.5, 3, 1.2, 0.5, 1), base: 0.2, gain: 0.8},
		{filter: gaborFilter(w, h, lags, 3.5, 2, 1.0, 1.2, 2), base: 0.1, gain: 0.6},
	}
	sim := newSimulation(t, cfg, cells, 5, binaryFrame)
	sim.record = record
	sim.run(seconds * 60)
	return sim
}

// The batch route (lag cross-products, one Cholesky) and the live block RLS
// are two exact routes to the same ridge solution; both are checked against
// scikit-learn's Ridge on their own (ridge_test.go, gram_test.go).
func TestMapperBatchRidgeMatchesLive(t *testing.T) {
	sim := smallSimulation(t, 40)
	n, d := sim.m.Units(), sim.m.dim
	weights := make([][]float64, n)
	for u := range weights {
		weights[u] = make([]float64, d)
	}
	intercepts := make([]float64, n)
	if err := sim.m.BatchRidgeTo(weights, intercepts, sim.m.Config().Lambda); err != nil {
		t.Fatal(err)
	}
	for u := range n {
		det, _ := sim.m.Snapshot().Detail(sim.m.UnitID(u))
		var num, den float64
		for i, v := range det.Ridge {
			num += (float64(v) - weights[u][i]) * (float64(v) - weights[u][i])
			den += weights[u][i] * weights[u][i]
		}
		if rel := math.Sqrt(num / den); rel > 1e-9 {
			t.Errorf("unit %d: live and batch ridge differ by %.2g relative", u, rel)
		}
		if diff := math.Abs(float64(det.Intercept) - intercepts[u]); diff > 1e-9*math.Abs(intercepts[u]) {
			t.Errorf("unit %d: intercept live %v, batch %v", u, det.Intercept, intercepts[u])
		}
	}
}

// The mapper's evidence choice must equal the evidence computed from the
// design matrix formed row by row (the evidence fixed point itself is
// checked against scikit-learn's BayesianRidge in evidence_test.go).
func TestMapperEvidence(t *testing.T) {
	sim := smallSimulationRecorded(t, 60)
	shared, per, err := sim.m.Evidence()
	if err != nil {
		t.Fatal(err)
	}
	n, d := len(sim.rows), len(sim.rows[0])
	mean := make([]float64, d)
	for _, r := range sim.rows {
		for i, v := range r {
			mean[i] += v / float64(n)
		}
	}
	g := mat.NewSymDense(d, nil)
	cross := mat.NewDense(d, 2, nil)
	yy := make([]float64, 2)
	for u := range 2 {
		var ym float64
		for _, y := range sim.ys {
			ym += y[u] / float64(n)
		}
		for k, r := range sim.rows {
			dy := sim.ys[k][u] - ym
			yy[u] += dy * dy
			for i := range d {
				cross.Set(i, u, cross.At(i, u)+(r[i]-mean[i])*dy)
			}
		}
	}
	for _, r := range sim.rows {
		for i := range d {
			for j := i; j < d; j++ {
				g.SetSym(i, j, g.At(i, j)+(r[i]-mean[i])*(r[j]-mean[j]))
			}
		}
	}
	wantPer, wantShared, err := Evidence(g, cross, yy, n)
	if err != nil {
		t.Fatal(err)
	}
	for u := range per {
		if math.Abs(per[u]-wantPer[u]) > 1e-8*wantPer[u] {
			t.Errorf("unit %d: evidence λ %v, from the design matrix %v", u, per[u], wantPer[u])
		}
	}
	if math.Abs(shared-wantShared) > 1e-6*wantShared {
		t.Errorf("shared λ %v, from the design matrix %v", shared, wantShared)
	}
}

func TestAddBinRefusesBadBins(t *testing.T) {
	good := smallSimulation(t, 5)
	before, _ := good.m.Snapshot().Detail("u0")
	frame := make([]float64, 36)
	for _, c := range []struct {
		name   string
		frame  []float64
		counts []Count
	}{
		{"short frame", frame[:35], nil},
		{"NaN pixel", append(append([]float64{}, frame[:35]...), math.NaN()), nil},
		{"infinite pixel", append(append([]float64{}, frame[:35]...), math.Inf(1)), nil},
		{"unknown unit", frame, []Count{{Unit: 7, N: 1}}},
		{"negative unit", frame, []Count{{Unit: -1, N: 1}}},
		{"negative count", frame, []Count{{Unit: 0, N: -1}}},
		{"NaN count", frame, []Count{{Unit: 0, N: math.NaN()}}},
	} {
		t.Run(c.name, func(t *testing.T) {
			if err := good.m.AddBin(c.frame, c.counts); !errors.Is(err, ErrBin) {
				t.Errorf("AddBin = %v, want an error wrapping ErrBin", err)
			}
		})
	}
	after, _ := good.m.Update().Detail("u0")
	for i := range before.Ridge {
		if before.Ridge[i] != after.Ridge[i] {
			t.Fatalf("refused bins changed the estimate at %d: %v → %v", i, before.Ridge[i], after.Ridge[i])
		}
	}
	if after.Spikes != before.Spikes {
		t.Errorf("refused bins changed the spike count: %d → %d", before.Spikes, after.Spikes)
	}
}

// With fewer bins than dimensions the evidence fixed point is degenerate
// (the model fits the noise exactly and λ runs off to 0): refused.
func TestMapperEvidenceNeedsBins(t *testing.T) {
	sim := smallSimulation(t, 2) // 117 bins, 144 dimensions
	if _, _, err := sim.m.Evidence(); err == nil {
		t.Fatal("evidence with fewer bins than dimensions was accepted")
	}
}
