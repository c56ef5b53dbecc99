package online

import (
	"errors"
	"fmt"
	"livefield/online/internal/fastmat"
	"math"

	"gonum.org/v1/gonum/mathext"
	"gonum.org/v1/gonum/stat/distuv"
)

// Significance is the outcome of testing one unit's field against a null
// hypothesis of no stimulus dependence.
type Significance struct {
	Q   float64 // the test statistic
	DOF float64 // degrees of freedom of the chi-square null (the F numerator's)
	// DenDOF is the F reference's denominator degrees of freedom when the
	// noise variance is estimated (the posterior test); 0 for a chi-square
	// reference (the white test, whose variance is known).
	DenDOF float64
	Scale  float64 // under the null Q ≈ Scale·χ²_DOF (1 for the white test)
	P      float64 // p-value; may underflow to 0
	// NegLog10P is −log10 P, finite (for finite Q) and non-decreasing in Q
	// even where P underflows.
	NegLog10P float64
}

// Errors of the significance tests.
var (
	ErrPixelVariance = errors.New("online: pixel variance must be positive and finite")
	ErrAutocov       = errors.New("online: spike-count autocovariance is not positive definite")
	ErrResidualDOF   = errors.New("online: no residual degrees of freedom left")
)

// tailFloor is the p-value below which ChiSquareTail computes −log10 p in
// log space instead of from the probability, which soon underflows.
const tailFloor = 1e-290

// ChiSquareTail returns the upper tail probability P(χ²_dof > q) and
// −log10 of it. The probability is gonum's regularised incomplete gamma
// function (distuv.ChiSquared.Survival). Where it falls below 1e-290, −log10 p
// comes from log Γ(a, x) = −x + a·log x + log F(a, x), a = dof/2, x = q/2,
// with F Legendre's continued fraction for the incomplete gamma function
// (Abramowitz & Stegun 6.5.31, in its even contraction) evaluated by the
// modified Lentz method (Thompson & Barnett 1986), so it stays finite and
// increasing in q; should the fraction not converge, the Wilson–Hilferty
// (1931) normal approximation of (χ²/ν)^{1/3} is used, floored at 290 to stay
// monotone. dof need not be an integer; p may underflow to 0.
func ChiSquareTail(q, dof float64) (p, negLog10 float64) {
	if math.IsNaN(q) || math.IsNaN(dof) || dof <= 0 {
		return math.NaN(), math.NaN()
	}
	if q <= 0 {
		return 1, 0
	}
	p = distuv.ChiSquared{K: dof}.Survival(q)
	if p >= tailFloor {
		return p, -math.Log10(p)
	}
	if math.IsInf(q, 1) {
		return 0, math.Inf(1)
	}
	a, x := dof/2, q/2
	if f, ok := gammaTailFraction(a, x); ok {
		lg, _ := math.Lgamma(a)
		return p, -(-x + a*math.Log(x) + math.Log(f) - lg) / math.Ln10
	}
	v := 2 / (9 * dof)
	z := (math.Cbrt(q/dof) - (1 - v)) / math.Sqrt(v)
	return p, math.Max(-logNormalTail(z)/math.Ln10, -math.Log10(tailFloor))
}

// gammaTailFraction evaluates Γ(a, x)·eˣ·x⁻ᵃ as the continued fraction
// 1/(b₀ + a₁/(b₁ + a₂/(b₂ + …))) with b_i = x + 2i + 1 − a and
// a_i = −i(i − a), which converges fast for x > a + 1.
func gammaTailFraction(a, x float64) (float64, bool) {
	const tiny, eps = 1e-300, 1e-15
	if !(x > a+1) {
		return 0, false
	}
	b := x + 1 - a
	c := 1 / tiny
	d := 1 / b
	f := d
	for i := 1.0; i < 1000; i++ {
		an := -i * (i - a)
		b += 2
		d = an*d + b
		if math.Abs(d) < tiny {
			d = tiny
		}
		c = b + an/c
		if math.Abs(c) < tiny {
			c = tiny
		}
		d = 1 / d
		delta := d * c
		f *= delta
		if math.Abs(delta-1) < eps {
			return f, f > 0
		}
	}
	return 0, false
}

// logNormalTail is log P(N(0,1) > z), accurate far into the tail.
func logNormalTail(z float64) float64 {
	if z < 30 {
		return math.Log(0.5 * math.Erfc(z/math.Sqrt2))
	}
	// Asymptotic series of the Mills ratio (Abramowitz & Stegun 26.2.12).
	z2 := 1 / (z * z)
	s := 1 - z2*(1-3*z2*(1-5*z2))
	return -0.5*z*z - math.Log(z) - 0.5*math.Log(2*math.Pi) + math.Log(s)
}

// WhiteTest tests spike-triggered averages against the white-noise null:
// spikes independent of a stimulus whose pixels and frames are independent
// with a known variance c² (Chichilnisky 2001 for the STA under white noise).
//
// Derivation (ours, from the null in ESTIMATION.md). Let T = Σ_k y_k(x_k − x̄)
// = Σ_k (y_k − ȳ) x_k, the centred cross-correlation (CrossTo), because
// Σ_k (y_k − ȳ) = 0. Condition on the spike train. Coefficient (p, τ) of x_k
// is pixel p of frame k−τ, so
//
//	Cov(T_{p,τ}, T_{p',τ'}) = Σ_k Σ_k' (y_k − ȳ)(y_k' − ȳ) Cov(s_{k−τ,p}, s_{k'−τ',p'})
//	                        = c² δ_{pp'} Σ_k (y_k − ȳ)(y_{k+τ'−τ} − ȳ) = c² δ_{pp'} A(τ' − τ),
//
// the sum over pairs of added bins (AutocovTo). The mean frame cancels, so
// this holds exactly, not only for large samples. Different pixels are
// uncorrelated, and the L lags of one pixel have the L×L Toeplitz covariance
// c²C with C_{ττ'} = A(|τ − τ'|). C is the Gram matrix of the zero-padded,
// shifted copies of the centred counts, hence positive definite whenever the
// counts are not all equal. By the central limit theorem over bins (exactly,
// for a Gaussian stimulus) z_p = T_{p,·}/c ~ N(0, C), so with C = GGᵀ
// (Cholesky) the vector G⁻¹z_p is standard normal and
//
//	Q = Σ_p z_pᵀ C⁻¹ z_p = Σ_p |G⁻¹ z_p|² ~ χ²_D,  D = P·L.
//
// The per-coefficient z_i = T_i / (c·sqrt(A(0))) use the diagonal only and
// are each N(0, 1), but Σ z_i² is not χ²_D when the counts are
// autocorrelated (bursts make it heavy-tailed).
//
// A WhiteTest holds its scratch; it is not safe for concurrent use.
type WhiteTest struct {
	pixels, lags int
	cross        []float64 // D
	autocov      []float64 // L
	chol         []float64 // L×L, lower triangle
	w            []float64 // D: the whitened coefficients, lag-major like cross
}

// NewWhiteTest returns a test for STAs of the given pixels and lags.
func NewWhiteTest(pixels, lags int) *WhiteTest {
	pixels, lags = max(pixels, 0), max(lags, 0)
	return &WhiteTest{
		pixels:  pixels,
		lags:    lags,
		cross:   make([]float64, pixels*lags),
		autocov: make([]float64, lags),
		chol:    make([]float64, lags*lags),
		w:       make([]float64, pixels*lags),
	}
}

// Unit tests unit u of s, whose stimulus has pixel variance variance, and
// writes the per-coefficient z scores into z (length D; nil skips them).
// s must have the pixels and lags of the test.
func (t *WhiteTest) Unit(z []float64, s *STA, u int, variance float64) (Significance, error) {
	if s.Dim() != len(t.cross) || s.Lags() != t.lags {
		return Significance{}, fmt.Errorf("online: white test of %d×%d, STA of dimension %d with %d lags",
			t.pixels, t.lags, s.Dim(), s.Lags())
	}
	s.CrossTo(t.cross, u)
	return t.UnitCross(z, t.cross, s, u, variance)
}

// UnitCross is Unit for a caller that has unit u's centred
// cross-correlation at hand (STA.CrossTo).
func (t *WhiteTest) UnitCross(z, cross []float64, s *STA, u int, variance float64) (Significance, error) {
	if s.Dim() != len(t.cross) || s.Lags() != t.lags {
		return Significance{}, fmt.Errorf("online: white test of %d×%d, STA of dimension %d with %d lags",
			t.pixels, t.lags, s.Dim(), s.Lags())
	}
	s.AutocovTo(t.autocov, u)
	return t.TestTo(z, cross, t.autocov, variance)
}

// TestTo tests a centred cross-correlation cross (length D, lag-major) given
// the centred spike-count autocovariance autocov (length L) and the pixel
// variance, writing the per-coefficient z scores into z (length D, or nil).
// A unit with no spike variance gets Q = 0, P = 1.
func (t *WhiteTest) TestTo(z, cross, autocov []float64, variance float64) (Significance, error) {
	D, L := len(t.cross), t.lags
	res := Significance{DOF: float64(D), Scale: 1, P: 1}
	if len(cross) != D || len(autocov) != L || (z != nil && len(z) != D) {
		return res, fmt.Errorf("online: white test wants %d coefficients and %d lags, got %d and %d",
			D, L, len(cross), len(autocov))
	}
	if !(variance > 0) || math.IsInf(variance, 0) {
		return res, ErrPixelVariance
	}
	if D == 0 || !(autocov[0] > 0) {
		clear(z)
		return res, nil
	}
	c := math.Sqrt(variance)
	if z != nil {
		inv := 1 / (c * math.Sqrt(autocov[0]))
		for i, v := range cross {
			z[i] = v * inv
		}
	}
	if !t.factor(autocov) {
		return res, ErrAutocov
	}
	// Forward substitution G w_p = z_p for every pixel p at once, z_p =
	// (T_{p,0}, …, T_{p,L−1})/c: lag i of all pixels is z's lag i minus
	// the earlier lags' rows scaled by G's row i (contiguous vector
	// operations), then divided by G_ii.
	var q float64
	P := t.pixels
	for i := 0; i < L; i++ {
		wi := t.w[i*P : (i+1)*P]
		if c == 1 { // unit pixel variance (binary ±1 noise): v/c is v
			copy(wi, cross[i*P:(i+1)*P])
		} else {
			for p, v := range cross[i*P : (i+1)*P] {
				wi[p] = v / c
			}
		}
		for j, g := range t.chol[i*L : i*L+i] {
			fastmat.AddScaled(wi, -g, t.w[j*P:(j+1)*P])
		}
		inv := 1 / t.chol[i*L+i]
		for p, v := range wi {
			v *= inv
			wi[p] = v
			q += v * v
		}
	}
	res.Q = q
	res.P, res.NegLog10P = ChiSquareTail(q, res.DOF)
	return res, nil
}

// factor computes the Cholesky factor of the Toeplitz matrix of a into
// t.chol; false when it is not positive definite.
func (t *WhiteTest) factor(a []float64) bool {
	L := t.lags
	g := t.chol
	for i := 0; i < L; i++ {
		for j := 0; j <= i; j++ {
			d := i - j
			v := a[d]
			for k := 0; k < j; k++ {
				v -= g[i*L+k] * g[j*L+k]
			}
			if i == j {
				if !(v > 0) {
					return false
				}
				g[i*L+i] = math.Sqrt(v)
			} else {
				g[i*L+j] = v / g[j*L+j]
			}
		}
	}
	return true
}

// PosteriorTest is PosteriorTestCorrected for counts without
// autocorrelation (SpikeCorrelation{1, 1}).
func PosteriorTest(w, cross []float64, rss float64, n int64, t1, t2 float64) (Significance, error) {
	return PosteriorTestCorrected(w, cross, rss, n, t1, t2, SpikeCorrelation{Mean: 1, Var: 1})
}

// PosteriorTestCorrected tests a ridge estimate against the null of no
// stimulus dependence for any stimulus, white or correlated. w are the ridge
// weights, cross the centred cross-correlation X̃ᵀy they were solved from
// ((λI + X̃ᵀX̃) w = X̃ᵀy), rss the residual sum of squares over n bins, and
// t1 = Σh_i, t2 = Σh_i² the traces of the hat matrix H, h_i = g_i/(g_i + λ)
// for the eigenvalues g_i of X̃ᵀX̃. corr corrects for the spike counts' own
// autocorrelation (see spikeCorrelation); {1, 1} for independent counts.
//
// Derivation. The statistic is Q = wᵀX̃ᵀy/σ̂² = ỹᵀHỹ/σ̂². With independent
// null residuals of variance σ², ỹᵀHỹ/σ² = Σh_i χ²_1 has mean t1 and
// variance 2t2, and E[RSS] = σ²(n − 1 − 2t1 + t2) (the residual maker is
// I − 1/n − H and tr((I − H)²) = n − 2t1 + t2: Hastie, Tibshirani &
// Friedman, The Elements of Statistical Learning, §3.4.1 and §7.6), so
// σ̂² = RSS/(n − 1 − 2t1 + t2) is unbiased. When the counts are
// autocorrelated the quadratic form's mean and variance become
// corr.Mean·t1 and corr.Var·2t2 (conditional on the spike train, the
// stimulus random; see spikeCorrelation). Matching the two moments with a
// scaled chi-square (Satterthwaite 1946), Q ≈ g·χ²_ν with
// g = corr.Var·t2/(corr.Mean·t1) and ν = corr.Mean²·t1²/(corr.Var·t2); the
// numerator is independent of σ̂² to first order, so F = Q/(g·ν) is compared
// with the F distribution of ν and n − 1 − 2t1 + t2 degrees of freedom
// rather than with χ²_ν, which overstates significance while n is not much
// larger than t1 (early in every block, and for long at large D).
func PosteriorTestCorrected(w, cross []float64, rss float64, n int64, t1, t2 float64, corr SpikeCorrelation) (Significance, error) {
	res := Significance{P: 1}
	if len(w) != len(cross) {
		return res, fmt.Errorf("online: posterior test: %d weights, %d cross-correlations", len(w), len(cross))
	}
	if !(t1 > 0) || !(t2 > 0) || t2 > t1*(1+1e-9) || math.IsInf(t1, 0) {
		return res, fmt.Errorf("online: posterior test: hat traces t1 = %g, t2 = %g, want 0 < t2 ≤ t1", t1, t2)
	}
	if !(corr.Mean > 0) || !(corr.Var > 0) || math.IsInf(corr.Mean, 0) || math.IsInf(corr.Var, 0) {
		return res, fmt.Errorf("online: posterior test: spike correlation %+v, want positive", corr)
	}
	dof := ResidualDOF(n, t1, t2)
	if !(dof > 0) {
		return res, ErrResidualDOF
	}
	if !(rss > 0) || math.IsInf(rss, 0) {
		return res, fmt.Errorf("online: posterior test: residual sum of squares %g, want positive", rss)
	}
	sigma2 := rss / dof
	var q float64
	for i, v := range w {
		q += v * cross[i]
	}
	mean := corr.Mean * t1
	res.Q = q / sigma2
	res.Scale = corr.Var * t2 / mean
	res.DOF = mean * mean / (corr.Var * t2)
	res.DenDOF = dof
	res.P, res.NegLog10P = FTail(res.Q/mean, res.DOF, dof)
	return res, nil
}

// ResidualDOF is n − 1 − 2t1 + t2, the residual degrees of freedom of a
// ridge fit with a free intercept over n bins whose hat matrix has traces
// t1 = tr H and t2 = tr H²: E[RSS] = σ²·ResidualDOF under independent noise
// (Hastie, Tibshirani & Friedman, ESL §7.6).
func ResidualDOF(n int64, t1, t2 float64) float64 { return float64(n) - 1 - 2*t1 + t2 }

// FTail returns the upper tail probability P(F_{d1,d2} > f) and −log10 of
// it, from the regularised incomplete beta function
// (P = I_{d2/(d2+d1·f)}(d2/2, d1/2), Abramowitz & Stegun 26.6.2). Where the
// probability falls below 1e-290 −log10 p comes from the chi-square tail of
// d1·f with d1 degrees of freedom (the limit d2 → ∞), which is lighter, so
// −log10 p stays non-decreasing in f.
func FTail(f, d1, d2 float64) (p, negLog10 float64) {
	if math.IsNaN(f) || !(d1 > 0) || !(d2 > 0) {
		return math.NaN(), math.NaN()
	}
	if f <= 0 {
		return 1, 0
	}
	if math.IsInf(d2, 1) {
		return ChiSquareTail(d1*f, d1)
	}
	p = mathext.RegIncBeta(d2/2, d1/2, d2/(d2+d1*f))
	if p >= tailFloor {
		return p, -math.Log10(p)
	}
	_, nl := ChiSquareTail(d1*f, d1)
	return p, math.Max(nl, -math.Log10(tailFloor))
}
