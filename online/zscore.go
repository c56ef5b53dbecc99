package online

import "livefield/online/internal/fastmat"

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
func (r *Ridge) samplingDiagTo(dst []float64) { r.samplingDiagTraces(dst) }

// diagRows is the number of rows of P a lane of samplingDiagTraces takes at
// a time: small enough that the triangle's rows (longer further down) even
// out over the lanes.
const diagRows = 64

// samplingDiagTraces writes the diagonal of M − λM² to dst, as
// samplingDiagTo, and returns the hat traces t1 = tr H and t2 = tr H² that
// HatTraces gives, from the same single pass over P's lower triangle, on
// all cores: with Q = M, tr Q = Σ M_ii and ‖Q‖_F² = Σ_i (M²)_ii, the sums
// the diagonal needs anyway. The lanes (one per worker) take fixed sets of
// rows and are summed in a fixed order, so the result does not depend on
// the schedule. With no rows the traces are 0.
func (r *Ridge) samplingDiagTraces(dst []float64) (t1, t2 float64) {
	d := r.dim
	if len(dst) != d {
		panic("online: samplingDiagTo: wrong length")
	}
	j := &r.diag
	j.r, j.dst = r, dst
	j.c, j.pe = r.interceptCorrection()
	lanes := fastmat.Workers()
	if len(j.sq) != lanes || len(j.sq[0]) != d {
		j.sq = make([][]float64, lanes)
		for k := range j.sq {
			j.sq[k] = make([]float64, d)
		}
		j.tr = make([]float64, lanes)
	}
	fastmat.Each(lanes, j)
	var tr, fro float64
	for _, t := range j.tr {
		tr += t
	}
	sq := j.sq[0]
	for i := range dst {
		for k := 1; k < lanes; k++ {
			sq[i] += j.sq[k][i]
		}
		fro += sq[i]
		dst[i] -= r.lam * sq[i]
		if dst[i] < 0 {
			dst[i] = 0
		}
	}
	*j = diagJob{sq: j.sq, tr: j.tr}
	if r.rows == 0 {
		return 0, 0
	}
	D := float64(d)
	return D - r.lam*tr, D - 2*r.lam*tr + r.lam*r.lam*fro
}

// diagJob is one lane of samplingDiagTraces: rows lo…lo+diagRows−1 for
// lo = (k + m·lanes)·diagRows, m = 0, 1, …
type diagJob struct {
	r   *Ridge
	dst []float64
	c   float64
	pe  []float64
	sq  [][]float64 // per lane, Σ_j M_ij² of the rows and columns it saw
	tr  []float64   // per lane, Σ M_ii of its rows
}

func (j *diagJob) Do(k, _ int) {
	r, d, lanes := j.r, j.r.dim, len(j.sq)
	sq := j.sq[k]
	clear(sq)
	var tr float64
	for lo := k * diagRows; lo < d; lo += lanes * diagRows {
		for i := lo; i < min(lo+diagRows, d); i++ {
			// Row i below the diagonal: its squares go to sq[i] and
			// to the sums of the columns j < i (M is symmetric).
			ci := j.c * j.pe[i]
			s := fastmat.ShiftedSquares(sq[:i], r.p[i*r.ld:i*r.ld+i], j.pe, ci)
			m := r.p[i*r.ld+i] + ci*j.pe[i]
			sq[i] += s + m*m
			j.dst[i] = m
			tr += m
		}
	}
	j.tr[k] = tr
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
