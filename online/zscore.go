package online

// The z of a ridge coefficient. The ridge estimate w = M X̃ᵀy with
// M = (X̃ᵀX̃ + λI)⁻¹ has, for independent residuals of variance σ² and a
// fixed stimulus, the sampling covariance
//
//	Cov(w) = σ² M X̃ᵀX̃ M = σ² (M − λM²),
//
// since X̃ᵀX̃ = M⁻¹ − λI. Its diagonal M_ii − λ Σ_j M_ij² is smaller than
// the posterior variance σ²M_ii that the z used to divide by (which made
// z² average 0.3–0.5 under the null), and z_i = w_i/sqrt(σ²·(M − λM²)_ii) is
// standard normal under the null, so Σz_i²/D averages 1. For autocorrelated
// counts the variance is scaled by the unit's correction Mean (the average
// over directions; individual coefficients may differ).

// samplingDiagTo writes the diagonal of M − λM² to dst (Dim() values),
// M the weights block of (Λ + ÃᵀÃ)⁻¹, from the lower triangle of P and the
// exact intercept correction (see interceptCorrection). With no rows it is
// 1/λ − λ/λ² = 0.
func (r *Ridge) samplingDiagTo(dst []float64) {
	d := r.dim
	if len(dst) != d {
		panic("online: samplingDiagTo: wrong length")
	}
	c, pe := r.interceptCorrection()
	sq := make([]float64, d)
	for i := 0; i < d; i++ {
		row := r.p[i*r.ld : i*r.ld+i]
		ci := c * pe[i]
		var s float64
		for j, p := range row {
			v := p + ci*pe[j]
			v2 := v * v
			s += v2
			sq[j] += v2
		}
		m := r.p[i*r.ld+i] + ci*pe[i]
		sq[i] += s + m*m
		dst[i] = m
	}
	for i := range dst {
		dst[i] -= r.lam * sq[i]
		if dst[i] < 0 {
			dst[i] = 0
		}
	}
}

// weightsMulTo writes M·v to dst, M the weights block of (Λ + ÃᵀÃ)⁻¹ (see
// samplingDiagTo), reading the lower triangle of P once: O(D²).
func (r *Ridge) weightsMulTo(dst, v []float64) {
	d := r.dim
	c, pe := r.interceptCorrection()
	var pv float64
	for j := 0; j < d; j++ {
		pv += pe[j] * v[j]
	}
	for i := 0; i < d; i++ {
		dst[i] = c * pe[i] * pv
	}
	for i := 0; i < d; i++ {
		row := r.p[i*r.ld : i*r.ld+i]
		vi := v[i]
		var s float64
		for j, p := range row {
			s += p * v[j]
			dst[j] += p * vi
		}
		dst[i] += s + r.p[i*r.ld+i]*vi
	}
}

// lagBlockSums returns, for δ = −(L−1)…L−1 (index δ+L−1), the P×P sums
// Σ_{i−j=δ} M_ij of the lag blocks of M, the weights block of
// (Λ + ÃᵀÃ)⁻¹ (lag-major: coefficient i·P + p is pixel p at lag i).
func (r *Ridge) lagBlockSums(P, L int) [][]float64 {
	out := make([][]float64, 2*L-1)
	for i := range out {
		out[i] = make([]float64, P*P)
	}
	c, pe := r.interceptCorrection()
	for a := 0; a < r.dim; a++ {
		i, p := a/P, a%P
		row := r.p[a*r.ld : a*r.ld+a+1]
		ca := c * pe[a]
		for b, v := range row {
			v += ca * pe[b]
			j, q := b/P, b%P
			out[i-j+L-1][p*P+q] += v
			if b != a {
				out[j-i+L-1][q*P+p] += v
			}
		}
	}
	return out
}
