package online

import (
	"errors"
	"fmt"

	"gonum.org/v1/gonum/mat"
)

// Evidence chooses the ridge penalty by empirical Bayes for the
// linear-Gaussian model (MacKay 1992; Bishop, PRML §3.5) from the bins so
// far. perUnit is each unit's own λ (NaN for a unit without spikes); shared
// is the one λ that maximises the units' summed evidence, the choice for the
// shared-gain estimator. It forms and reduces the D×D Gram matrix, O(D³):
// about a minute at D = 3072 on one core, so it belongs at the end of a block
// (the next block can start with it) or in an offline pass, not in Update.
func (m *Mapper) Evidence() (shared float64, perUnit []float64, err error) {
	if bins := m.gram.Bins(); bins < m.dim {
		// With fewer bins than dimensions the model can fit the noise
		// exactly, and the fixed point runs off to λ → 0.
		return 0, nil, fmt.Errorf("online: evidence: %d bins for %d dimensions; it needs at least as many bins as dimensions (%.0f s of data)",
			bins, m.dim, float64(m.dim)*m.cfg.FramePeriod)
	}
	g, cross, err := m.centredMoments()
	if err != nil {
		return 0, nil, err
	}
	yy := make([]float64, len(m.ids))
	ac := make([]float64, m.cfg.Lags)
	for u := range yy {
		m.sta.AutocovTo(ac, u)
		yy[u] = ac[0]
	}
	perUnit, shared, err = Evidence(g, cross, yy, m.gram.Bins())
	return shared, perUnit, err
}

// BatchRidgeTo solves the ridge once, exactly, over all bins so far at
// penalty lambda, for every unit: weights[u] (len D, lag-major) and
// intercepts[u]. With lambda equal to the mapper's own it gives the live
// estimate again, by another route (lag cross-products and one Cholesky).
func (m *Mapper) BatchRidgeTo(weights [][]float64, intercepts []float64, lambda float64) error {
	n := len(m.ids)
	if len(weights) != n || len(intercepts) != n {
		return fmt.Errorf("online: batch ridge: %d weight rows and %d intercepts for %d units", len(weights), len(intercepts), n)
	}
	if n == 0 {
		return errors.New("online: batch ridge: no units")
	}
	raw := mat.NewDense(m.dim, n, nil)
	mean := make([]float64, m.dim)
	if err := m.gram.MeanTo(mean); err != nil {
		return err
	}
	col := make([]float64, m.dim)
	ySum := make([]float64, n)
	for u := range n {
		m.sta.CrossTo(col, u)
		ySum[u] = m.sta.Spikes(u)
		for i := range col {
			raw.Set(i, u, col[i]+mean[i]*ySum[u]) // Σ y x = X̃ᵀy + x̄ Σ y
		}
	}
	w, b, err := BatchRidge(m.gram, raw, ySum, lambda)
	if err != nil {
		return err
	}
	for u := range n {
		if len(weights[u]) != m.dim {
			return fmt.Errorf("online: batch ridge: weights[%d] has %d values, want %d", u, len(weights[u]), m.dim)
		}
		mat.Col(weights[u], u, w)
		intercepts[u] = b[u]
	}
	return nil
}

// centredMoments returns the centred Gram X̃ᵀX̃ of the used bins and the
// D×U matrix of the units' centred cross-correlations X̃ᵀy.
func (m *Mapper) centredMoments() (*mat.SymDense, *mat.Dense, error) {
	if len(m.ids) == 0 {
		return nil, nil, errors.New("online: evidence: no units")
	}
	var g mat.SymDense
	if err := m.gram.GramTo(&g, true); err != nil {
		return nil, nil, err
	}
	cross := mat.NewDense(m.dim, len(m.ids), nil)
	col := make([]float64, m.dim)
	for u := range m.ids {
		m.sta.CrossTo(col, u)
		cross.SetCol(u, col)
	}
	return &g, cross, nil
}
