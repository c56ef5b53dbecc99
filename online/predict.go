package online

import "math"

// Cross-validated predictive quality. Split-half reliability says whether
// two halves of the data agree about a field; it does not say whether the
// field predicts the spikes (a reliable but weak field predicts little).
// PredictiveR is the correlation between a half's spike counts and the
// prediction of the field estimated from the other half alone, averaged
// over the two directions (A predicts B, B predicts A); the halves are the
// alternating chunks of the split-half reliability.
//
// From sufficient statistics, with C_H = Σ_{k∈H}(y_k − ȳ_H)x_k the
// cross-correlation of half H centred within it (N_H times its STA), a the
// estimate from half A, and V_H = Σ_{k∈H}(y_k − ȳ_H)²:
//
//	r_{A→B} = C_Bᵀa / sqrt(aᵀG_B a · V_B),
//
// where G_B, the centred Gram matrix of half B's stimuli, is taken as
// (n_B/n)·G for a stationary stimulus whose halves interleave (chunks of a
// few seconds): aᵀGa = aᵀC_A − λ|a|² for the ridge half fit, whose
// (G + λI)a = C_A (see halvesTo), and n_B·c²|a|² for white noise of pixel
// variance c² with the STA halves. Under the null a is independent of half
// B's counts, so r_{A→B} has mean 0 and standard deviation near 1/sqrt(n_B).

// predictiveR is the mean of r_{A→B} and r_{B→A}; NaN when a half has no
// spikes or no variance.
func predictiveR(a, b, ca, cb []float64, gaa, gbb float64, na, nb int64, va, vb float64) float64 {
	return predictiveRFrom(dot(cb, a), dot(ca, b), gaa, gbb, na, nb, va, vb)
}

// predictiveRFrom is predictiveR from the products C_Bᵀa and C_Aᵀb.
func predictiveRFrom(cba, cab, gaa, gbb float64, na, nb int64, va, vb float64) float64 {
	n := float64(na + nb)
	rAB := cba / math.Sqrt(gaa*float64(nb)/n*vb)
	rBA := cab / math.Sqrt(gbb*float64(na)/n*va)
	r := (rAB + rBA) / 2
	if math.IsNaN(r) || math.IsInf(r, 0) {
		return math.NaN()
	}
	return r
}

// unitPredictiveR computes unit u's PredictiveR from its half estimates
// a and b (ridge half fits, or STA halves on white noise), using scratch
// ca and cb for the half cross-correlations.
func (m *Mapper) unitPredictiveR(u int, a, b, ca, cb []float64, staHalves bool) float64 {
	na, nb := m.sta.HalfBins()
	if na < 2 || nb < 2 {
		return math.NaN()
	}
	ya, yb := m.sta.HalfSpikes(u)
	va := m.cal.sumSq[u][0] - ya*ya/float64(na)
	vb := m.cal.sumSq[u][1] - yb*yb/float64(nb)
	if staHalves {
		// a and b are the STA halves (white noise), so C_A = y_A·a and C_B = y_B·b:
		// one pass forms the products value by value, rounded as the
		// scaled copies would be, with |a|² and |b|² beside them.
		var cba, cab, aa, bb float64
		b = b[:len(a)]
		for i, x := range a {
			y := b[i]
			cba += y * yb * x
			cab += x * ya * y
			aa += x * x
			bb += y * y
		}
		// aᵀG_B a ≈ n_B c²|a|², written as (n/n_B)·that for predictiveR's scaling.
		n := float64(na + nb)
		gaa, gbb := n*m.cfg.PixelVariance*aa, n*m.cfg.PixelVariance*bb
		if !(gaa > 0) || !(gbb > 0) || !(va > 0) || !(vb > 0) {
			return math.NaN()
		}
		return predictiveRFrom(cba, cab, gaa, gbb, na, nb, va, vb)
	}
	m.sta.HalvesTo(ca, cb, u)
	for i := range ca {
		ca[i] *= ya
		cb[i] *= yb
	}
	var gaa, gbb float64
	if m.cfg.White {
		// aᵀG_B a ≈ n_B c²|a|², written as (n/n_B)·that for predictiveR's scaling.
		n := float64(na + nb)
		gaa = n * m.cfg.PixelVariance * dot(a, a)
		gbb = n * m.cfg.PixelVariance * dot(b, b)
	} else {
		lam := m.cfg.Lambda
		gaa = dot(a, ca) - lam*dot(a, a)
		gbb = dot(b, cb) - lam*dot(b, b)
	}
	if !(gaa > 0) || !(gbb > 0) || !(va > 0) || !(vb > 0) {
		return math.NaN()
	}
	return predictiveR(a, b, ca, cb, gaa, gbb, na, nb, va, vb)
}
