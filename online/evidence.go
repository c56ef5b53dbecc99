package online

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
)

// EvidenceFit is one unit's empirical-Bayes fit of the linear-Gaussian model
// y = b + wᵀx + ε, w ~ N(0, α⁻¹I), ε ~ N(0, β⁻¹) (Bishop, Pattern
// Recognition and Machine Learning, §3.5; MacKay 1992).
type EvidenceFit struct {
	Lambda      float64 // the ridge penalty α/β
	Alpha       float64 // weight (prior) precision
	Beta        float64 // noise precision
	Gamma       float64 // effective number of well-determined weights
	LogEvidence float64 // ln p(y | α, β) at the fixed point
	Iterations  int
	Converged   bool
}

// EvidenceBasis holds the eigendecomposition G = V diag(g) Vᵀ of a centred
// Gram matrix X̃ᵀX̃, shared by all units that see the same stimulus. Each
// unit's fit then costs one projection Vᵀ(X̃ᵀy) and O(D) per iteration.
//
// An EvidenceBasis is not safe for concurrent use (it keeps scratch space).
type EvidenceBasis struct {
	dim, bins int
	g         []float64 // eigenvalues, negative round-off clipped to 0
	v         *mat.Dense
	z2        []float64 // scratch: squared projections of one unit
	z         *mat.VecDense
}

const (
	evidenceMaxIter = 10000
	evidenceTol     = 1e-12 // relative change of λ between iterations
)

// NewEvidenceBasis decomposes the centred Gram g (Dim×Dim) of a design with
// `bins` rows.
func NewEvidenceBasis(g mat.Symmetric, bins int) (*EvidenceBasis, error) {
	if g == nil {
		return nil, errors.New("online: NewEvidenceBasis: nil Gram")
	}
	d := g.SymmetricDim()
	if d == 0 || bins < 2 {
		return nil, fmt.Errorf("online: NewEvidenceBasis: need a non-empty Gram and at least 2 bins, got %d×%d and %d", d, d, bins)
	}
	var eig mat.EigenSym
	if !eig.Factorize(g, true) {
		return nil, errors.New("online: NewEvidenceBasis: eigendecomposition failed")
	}
	b := &EvidenceBasis{dim: d, bins: bins, g: eig.Values(nil), v: new(mat.Dense), z2: make([]float64, d), z: mat.NewVecDense(d, nil)}
	eig.VectorsTo(b.v)
	for i, x := range b.g {
		if !(x > 0) {
			b.g[i] = 0
		}
	}
	return b, nil
}

// project fills b.z = Vᵀc and b.z2 = z².
func (b *EvidenceBasis) project(cross []float64) error {
	if len(cross) != b.dim {
		return fmt.Errorf("online: EvidenceBasis: cross-correlation has %d values, want %d", len(cross), b.dim)
	}
	b.z.MulVec(b.v.T(), mat.NewVecDense(b.dim, cross))
	for i := range b.z2 {
		z := b.z.AtVec(i)
		b.z2[i] = z * z
	}
	return nil
}

// terms returns, for penalty λ, ‖m‖², RSS and γ of the posterior mean
// m = (G + λI)⁻¹X̃ᵀy, using the squared projections z2.
func (b *EvidenceBasis) terms(z2 []float64, yy, lambda float64) (m2, rss, gamma float64) {
	var fit float64
	for i, g := range b.g {
		r := 1 / (g + lambda)
		m2 += z2[i] * r * r
		fit += z2[i] * (g + 2*lambda) * r * r
		gamma += g * r
	}
	rss = yy - fit
	if rss < 0 {
		rss = 0
	}
	return m2, rss, gamma
}

// Fit runs the evidence fixed point for one unit: cross = X̃ᵀ(y − ȳ) (len
// Dim), yy = Σ(y − ȳ)². Starting from β = n/yy, α = 1, it iterates
// γ = Σ βg/(α + βg), α = γ/‖m‖², β = (n − γ)/RSS until λ = α/β changes by
// less than 1e-12 relative. A unit whose weights shrink to nothing gets
// λ = +Inf and Converged false.
func (b *EvidenceBasis) Fit(cross []float64, yy float64) (EvidenceFit, error) {
	if !(yy > 0) || math.IsInf(yy, 0) {
		return EvidenceFit{}, fmt.Errorf("online: EvidenceBasis.Fit: Σ(y−ȳ)² = %v must be positive and finite", yy)
	}
	if err := b.project(cross); err != nil {
		return EvidenceFit{}, err
	}
	n := float64(b.bins)
	alpha, beta := 1.0, n/yy
	fit := EvidenceFit{}
	lambda := alpha / beta
	gmax := 0.0
	for _, g := range b.g {
		gmax = max(gmax, g)
	}
	for it := 1; it <= evidenceMaxIter; it++ {
		m2, rss, gamma := b.terms(b.z2, yy, lambda)
		if m2 == 0 || rss == 0 {
			break
		}
		alpha, beta = gamma/m2, (n-gamma)/rss
		next := alpha / beta
		fit.Iterations = it
		if math.Abs(next-lambda) <= evidenceTol*lambda {
			lambda = next
			fit.Converged = true
			break
		}
		lambda = next
		if lambda > 1e12*(gmax+1) {
			lambda = math.Inf(1)
			break
		}
	}
	fit.Lambda, fit.Alpha, fit.Beta = lambda, alpha, beta
	m2, rss, gamma := b.terms(b.z2, yy, lambda)
	fit.Gamma = gamma
	fit.LogEvidence = b.logEvidence(alpha, beta, m2, rss)
	return fit, nil
}

// logEvidence is Bishop (3.86): D/2 ln α + n/2 ln β − β/2 RSS − α/2 ‖m‖²
// − ½ ln|αI + βG| − n/2 ln 2π.
func (b *EvidenceBasis) logEvidence(alpha, beta, m2, rss float64) float64 {
	d, n := float64(b.dim), float64(b.bins)
	det := 0.0
	for _, g := range b.g {
		det += math.Log(alpha + beta*g)
	}
	return d/2*math.Log(alpha) + n/2*math.Log(beta) - beta/2*rss - alpha/2*m2 - det/2 - n/2*math.Log(2*math.Pi)
}

// PosteriorMeanTo writes m = (G + λI)⁻¹ cross into dst (both len Dim).
func (b *EvidenceBasis) PosteriorMeanTo(dst, cross []float64, lambda float64) error {
	if len(dst) != b.dim {
		return fmt.Errorf("online: EvidenceBasis.PosteriorMeanTo: destination has %d values, want %d", len(dst), b.dim)
	}
	if !(lambda > 0) || math.IsInf(lambda, 0) {
		return fmt.Errorf("online: EvidenceBasis.PosteriorMeanTo: lambda %v must be positive and finite", lambda)
	}
	if err := b.project(cross); err != nil {
		return err
	}
	for i, g := range b.g {
		b.z.SetVec(i, b.z.AtVec(i)/(g+lambda))
	}
	mat.NewVecDense(b.dim, dst).MulVec(b.v, b.z)
	return nil
}

// profile is the log evidence summed over units for a shared λ, each unit's
// noise precision at its own optimum β = n/Φ, Φ = yy − Σ z²/(g + λ), up to a
// constant: Σ_u [D/2 ln λ − n/2 ln Φ_u − ½ Σ_i ln(λ + g_i)].
func (b *EvidenceBasis) profile(z2 [][]float64, yy []float64, lambda float64) float64 {
	det := 0.0
	for _, g := range b.g {
		det += math.Log(lambda + g)
	}
	d, n := float64(b.dim), float64(b.bins)
	sum := 0.0
	for u, z := range z2 {
		phi := yy[u]
		for i, g := range b.g {
			phi -= z[i] / (g + lambda)
		}
		if !(phi > 0) {
			return math.Inf(-1)
		}
		sum += d/2*math.Log(lambda) - n/2*math.Log(phi) - det/2
	}
	return sum
}

// Evidence fits every unit by the evidence fixed point and chooses one
// shared penalty for estimators that keep a single gain for all units.
//
// g is the centred Gram X̃ᵀX̃ (Dim×Dim) of a design with `bins` rows, cross
// is Dim×U with column u = X̃ᵀ(y_u − ȳ_u), and yy[u] = Σ(y_u − ȳ_u)². Units
// with yy[u] = 0 (no spikes) get λ = NaN and take no part in the choice.
//
// The shared λ maximises the summed log evidence of all units under one
// prior-to-noise ratio λ = α/β, each unit keeping its own noise level (β
// profiled out analytically). That is the type-II maximum likelihood of the
// model the shared-gain estimator assumes, and weights units by how much
// their data say about λ, unlike a median of the individual values. The
// maximiser is located on a logarithmic grid spanning the individual λs
// (widened 100-fold each way) and refined by golden-section search.
func Evidence(g mat.Symmetric, cross mat.Matrix, yy []float64, bins int) (lambdas []float64, shared float64, err error) {
	b, err := NewEvidenceBasis(g, bins)
	if err != nil {
		return nil, math.NaN(), err
	}
	r, u := cross.Dims()
	if r != b.dim || u != len(yy) {
		return nil, math.NaN(), fmt.Errorf("online: Evidence: cross is %d×%d with %d sums of squares, want %d rows and one sum per column", r, u, len(yy), b.dim)
	}
	lambdas = make([]float64, u)
	col := make([]float64, r)
	var z2 [][]float64
	var yyUsed []float64
	lo, hi := math.Inf(1), 0.0
	for j := range u {
		lambdas[j] = math.NaN()
		if yy[j] == 0 {
			continue
		}
		mat.Col(col, j, cross)
		fit, err := b.Fit(col, yy[j])
		if err != nil {
			return nil, math.NaN(), fmt.Errorf("online: Evidence: unit %d: %w", j, err)
		}
		lambdas[j] = fit.Lambda
		z2 = append(z2, append([]float64(nil), b.z2...))
		yyUsed = append(yyUsed, yy[j])
		if fit.Lambda > 0 && !math.IsInf(fit.Lambda, 0) {
			lo, hi = min(lo, fit.Lambda), max(hi, fit.Lambda)
		}
	}
	if len(z2) == 0 || hi == 0 {
		return lambdas, math.NaN(), nil
	}
	return lambdas, b.sharedLambda(z2, yyUsed, lo/100, hi*100), nil
}

// sharedLambda maximises profile over λ in [lo, hi].
func (b *EvidenceBasis) sharedLambda(z2 [][]float64, yy []float64, lo, hi float64) float64 {
	f := func(t float64) float64 { return b.profile(z2, yy, math.Exp(t)) }
	const grid = 60
	a, c := math.Log(lo), math.Log(hi)
	best, bestT := math.Inf(-1), a
	step := (c - a) / grid
	for i := 0; i <= grid; i++ {
		t := a + float64(i)*step
		if v := f(t); v > best {
			best, bestT = v, t
		}
	}
	// Golden-section search on the grid cell either side of the best point.
	x0, x1 := bestT-step, bestT+step
	const phi = 0.6180339887498949
	p, q := x1-phi*(x1-x0), x0+phi*(x1-x0)
	fp, fq := f(p), f(q)
	for x1-x0 > 1e-12 {
		if fp < fq {
			x0, p, fp = p, q, fq
			q = x0 + phi*(x1-x0)
			fq = f(q)
		} else {
			x1, q, fq = q, p, fp
			p = x1 - phi*(x1-x0)
			fp = f(p)
		}
	}
	return math.Exp((x0 + x1) / 2)
}
