package online

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/blas"
	lapackgo "gonum.org/v1/gonum/lapack/gonum"
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

// EvidenceBasis holds the orthogonal reduction G = Q T Qᵀ of a centred Gram
// matrix X̃ᵀX̃ to a tridiagonal T, and the eigenvalues g of G, all shared by
// the units that see the same stimulus. With c' = Qᵀ(X̃ᵀy) formed once per
// unit, every quantity of the fixed point at a penalty λ follows from one
// tridiagonal solve (T + λI)m' = c' and the eigenvalues: O(D) per
// iteration. (Equivalent to working in the eigenbasis, G = V diag(g) Vᵀ, but
// without the costly eigenvectors.)
//
// An EvidenceBasis is not safe for concurrent use (it keeps scratch space).
type EvidenceBasis struct {
	dim, bins int
	g         []float64 // eigenvalues of G, negative round-off clipped to 0
	diag, off []float64 // T
	q         *mat.Dense
	zt        []float64 // scratch: c' of one unit
	x, piv    []float64 // scratch for the tridiagonal solve
}

const (
	evidenceMaxIter = 10000
	evidenceTol     = 1e-12 // relative change of λ between iterations
)

// NewEvidenceBasis reduces the centred Gram g (Dim×Dim) of a design with
// `bins` rows.
func NewEvidenceBasis(g mat.Symmetric, bins int) (*EvidenceBasis, error) {
	if g == nil {
		return nil, errors.New("online: NewEvidenceBasis: nil Gram")
	}
	d := g.SymmetricDim()
	if d == 0 || bins < 2 {
		return nil, fmt.Errorf("online: NewEvidenceBasis: need a non-empty Gram and at least 2 bins, got %d×%d and %d", d, d, bins)
	}
	a := make([]float64, d*d)
	for i := range d {
		for j := 0; j <= i; j++ {
			v := g.At(i, j)
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return nil, fmt.Errorf("online: NewEvidenceBasis: Gram element (%d, %d) is %v", i, j, v)
			}
			a[i*d+j] = v
		}
	}
	b := &EvidenceBasis{
		dim: d, bins: bins,
		g: make([]float64, d), diag: make([]float64, d), off: make([]float64, max(d-1, 0)),
		zt: make([]float64, d), x: make([]float64, d), piv: make([]float64, d),
	}
	var impl lapackgo.Implementation
	tau := make([]float64, max(d-1, 1))
	work := make([]float64, 1)
	impl.Dsytrd(blas.Lower, d, a, d, b.diag, b.off, tau, work, -1)
	work = make([]float64, int(work[0]))
	impl.Dsytrd(blas.Lower, d, a, d, b.diag, b.off, tau, work, len(work))
	copy(b.g, b.diag)
	e := append([]float64(nil), b.off...)
	if !impl.Dsterf(d, b.g, e) {
		return nil, errors.New("online: NewEvidenceBasis: eigenvalues did not converge")
	}
	for i, x := range b.g {
		if !(x > 0) {
			b.g[i] = 0
		}
	}
	impl.Dorgtr(blas.Lower, d, a, d, tau, work, -1)
	if need := int(work[0]); need > len(work) {
		work = make([]float64, need)
	}
	impl.Dorgtr(blas.Lower, d, a, d, tau, work, len(work))
	b.q = mat.NewDense(d, d, a)
	return b, nil
}

// project fills b.zt = Qᵀc.
func (b *EvidenceBasis) project(cross []float64) error {
	if len(cross) != b.dim {
		return fmt.Errorf("online: EvidenceBasis: cross-correlation has %d values, want %d", len(cross), b.dim)
	}
	mat.NewVecDense(b.dim, b.zt).MulVec(b.q.T(), mat.NewVecDense(b.dim, cross))
	return nil
}

// solve writes (T + λI)⁻¹ zt into b.x (LDLᵀ of a positive definite
// tridiagonal matrix).
func (b *EvidenceBasis) solve(zt []float64, lambda float64) {
	// T + λI = L D Lᵀ, L unit lower bidiagonal with multipliers
	// off[i−1]/D[i−1]; piv holds D.
	x, piv, dd := b.x, b.piv, b.diag
	piv[0] = dd[0] + lambda
	x[0] = zt[0]
	for i := 1; i < b.dim; i++ {
		m := b.off[i-1] / piv[i-1]
		piv[i] = dd[i] + lambda - m*b.off[i-1]
		x[i] = zt[i] - m*x[i-1]
	}
	n := b.dim - 1
	x[n] /= piv[n]
	for i := n - 1; i >= 0; i-- {
		x[i] = x[i]/piv[i] - b.off[i]/piv[i]*x[i+1]
	}
}

// terms returns, for penalty λ, ‖m‖², RSS, γ and c'ᵀm' of the posterior
// mean m = (G + λI)⁻¹X̃ᵀy, from c' = zt.
func (b *EvidenceBasis) terms(zt []float64, yy, lambda float64) (m2, rss, gamma, cm float64) {
	b.solve(zt, lambda)
	var mtm float64 // m'ᵀ T m'
	for i, x := range b.x {
		m2 += x * x
		cm += zt[i] * x
		mtm += b.diag[i] * x * x
		if i > 0 {
			mtm += 2 * b.off[i-1] * b.x[i-1] * x
		}
	}
	for _, g := range b.g {
		gamma += g / (g + lambda)
	}
	rss = max(yy-2*cm+mtm, 0)
	return m2, rss, gamma, cm
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
		m2, rss, gamma, _ := b.terms(b.zt, yy, lambda)
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
	m2, rss, gamma, _ := b.terms(b.zt, yy, lambda)
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
	b.solve(b.zt, lambda)
	mat.NewVecDense(b.dim, dst).MulVec(b.q, mat.NewVecDense(b.dim, b.x))
	return nil
}

// profile is the log evidence summed over units for a shared λ, each unit's
// noise precision at its own optimum β = n/Φ, Φ = yy − cᵀ(G + λI)⁻¹c, up to
// a constant: Σ_u [D/2 ln λ − n/2 ln Φ_u − ½ Σ_i ln(λ + g_i)].
func (b *EvidenceBasis) profile(zt [][]float64, yy []float64, lambda float64) float64 {
	det := 0.0
	for _, g := range b.g {
		det += math.Log(lambda + g)
	}
	d, n := float64(b.dim), float64(b.bins)
	sum := 0.0
	for u, z := range zt {
		_, _, _, cm := b.terms(z, yy[u], lambda)
		phi := yy[u] - cm
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
	var zt [][]float64
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
		zt = append(zt, append([]float64(nil), b.zt...))
		yyUsed = append(yyUsed, yy[j])
		if fit.Lambda > 0 && !math.IsInf(fit.Lambda, 0) {
			lo, hi = min(lo, fit.Lambda), max(hi, fit.Lambda)
		}
	}
	if len(zt) == 0 || hi == 0 {
		return lambdas, math.NaN(), nil
	}
	return lambdas, b.sharedLambda(zt, yyUsed, lo/100, hi*100), nil
}

// sharedLambda maximises profile over λ in [lo, hi].
func (b *EvidenceBasis) sharedLambda(zt [][]float64, yy []float64, lo, hi float64) float64 {
	f := func(t float64) float64 { return b.profile(zt, yy, math.Exp(t)) }
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
