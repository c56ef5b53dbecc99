package online

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"

	"livefield/online/internal/fastmat"
)

// The Poisson refinement of the smooth-local estimate: the same prior, a
// Poisson likelihood instead of the Gaussian one.
//
// # Model
//
// The linear–nonlinear–Poisson model with exponential nonlinearity: the
// count y_t of bin t is Poisson with mean λ_t = exp(b + x_tᵀw), x_t the
// stimulus of the unit's prior window at the window's lags, b an intercept
// (the bin width folded in, flat prior) and w ~ N(0, C), C the unit's
// smooth-local prior covariance (prior.go) in its window. The log posterior,
// up to the constant −½ log|2πC|, is
//
//	L(b, w) = Σ_t [y_t η_t − exp(η_t) − log y_t!] − ½ wᵀC⁻¹w,   η_t = b + x_tᵀw.
//
// The log likelihood is concave in (b, w) for the exponential nonlinearity
// (Paninski 2004, Network 15: 243–262, from memory), and the prior term is
// strictly concave, so the maximum a posteriori is unique and Newton's
// method with a backtracking line search reaches it from any start.
//
// # Factor
//
// As in the smooth-local fit, C is never inverted: with a factor C = RRᵀ,
// R = √s′ · E^½ K^½, the filter is w = Rv and the prior term is −½ vᵀv, so
// the Newton system in (b, v),
//
//	[ Σλ_t        (RᵀΣλ_t x_t)ᵀ ]       [ Σ(y_t − λ_t)           ]
//	[ RᵀΣλ_t x_t   RᵀHR + I     ] Δ  =  [ Rᵀ Σ(y_t − λ_t)x_t − v ],   H = Σ_t λ_t x_t x_tᵀ,
//
// has a positive definite matrix (eigenvalues of the v block ≥ 1) even where
// the envelope makes C nearly singular; it is factored by gonum's Cholesky
// (LAPACK). s′ = s/ȳ², ȳ the mean count per bin: the smooth-local scale s
// is in squared counts per unit of stimulus, and around zero drive a linear
// filter w_lin corresponds to the exponential model's w ≈ w_lin/ȳ.
//
// # Iteration and stopping rule
//
// Start at v = 0, b = log ȳ (the maximum along b there). Each iteration
// forms the gradient g and the negative Hessian A at the current point, the
// Newton step Δ = A⁻¹g and the Newton decrement δ² = gᵀΔ (δ²/2 estimates
// the gap to the maximum: Boyd & Vandenberghe, Convex Optimization, §9.5,
// from memory), then halves the step from t = 1 until the Armijo condition
// L(θ + tΔ) ≥ L(θ) + 10⁻⁴ t δ² holds (at most 50 halvings). It stops,
// converged, after the step whose δ²/2 was at most Tolerance·max(1, |L|)
// (that last step is taken whole unless it lowers L by more than round-off),
// or unconverged after MaxIterations steps or a failed line search.
//
// # Cost
//
// For T bins and a window of D coefficients, one iteration costs about
// T·D²/2 multiply-adds for H (its lower triangle, on the package's matrix
// kernel, in chunks of poissonChunk rows built from the compact BinStore),
// 2·D³ for RᵀHR and (D+1)³/3 for the factorisation, and each line-search
// trial T·D. At T = 108000 (30 minutes at 60 Hz) and the default 7×7×6
// window (D = 294) that is 5·10⁹ multiply-adds per iteration, under a
// second on one core; the units of the tests and the reference session
// took 3–6 iterations. Memory per fit: five D×D matrices and three
// poissonChunk×D chunks, about 5 MB at D = 294.

// PoissonOptions configure the Poisson refinement.
type PoissonOptions struct {
	// MaxIterations bounds the Newton steps (default 50).
	MaxIterations int
	// Tolerance is the stopping rule's relative bound on δ²/2, the Newton
	// decrement's estimate of the remaining gain (default 1e-10).
	Tolerance float64
	// Workers fits that many units at once in PoissonMAPAll (default
	// GOMAXPROCS).
	Workers int
	// Progress, when set, is called by PoissonMAPAll after each unit with
	// the units done and the total (serialised, from the workers).
	Progress func(done, total int)
}

func (o PoissonOptions) withDefaults() PoissonOptions {
	if o.MaxIterations <= 0 {
		o.MaxIterations = 50
	}
	if !(o.Tolerance > 0) {
		o.Tolerance = 1e-10
	}
	return o
}

// PoissonFit is one unit's Poisson refinement.
type PoissonFit struct {
	// Weights is the MAP filter w in the full lag-major layout of the ridge
	// (length D), zero outside the window. Its units are log-rate per unit
	// of stimulus.
	Weights []float64
	Window  PriorWindow
	// Intercept is b: the log of the expected count per bin at zero
	// stimulus.
	Intercept float64
	// LogPosterior is L at the MAP (see the package comment above).
	LogPosterior float64
	Iterations   int  // Newton steps taken
	Converged    bool // the stopping rule was met
	Bins         int  // used bins behind the fit
}

// poissonDesign is a source of design rows: bins() rows of dim() values.
type poissonDesign interface {
	bins() int
	dim() int
	rowsTo(dst []float64, from, n int)
}

// poissonData is one unit's problem: the design rows and the count
// statistics the log posterior needs besides them.
type poissonData struct {
	design poissonDesign
	xy     []float64 // Σ_t y_t x_t
	sy     float64   // Σ_t y_t
	logFac float64   // Σ_t log y_t!
}

// poissonChunk is the number of design rows built at a time.
const poissonChunk = 256

// poissonBlock is the height of the block rows of the Hessian's product (a
// multiple of the matrix kernel's 12 rows).
const poissonBlock = 48

// poissonSolver holds the scratch of one fit at a time (one goroutine).
type poissonSolver struct {
	k         int
	r, rt     []float64 // prior factor R and its transpose, k×k
	x, xt, xl []float64 // chunk rows, their transpose, rows scaled by λ
	eta       []float64 // chunk
	w         []float64 // R v
	h, tmp    []float64 // k×k: H, then H·R
	gx        []float64 // Σ λ_t x_t
	a         []float64 // (k+1)² negative Hessian, row-major
	grad      []float64 // k+1
	theta     []float64 // k+1: b, v
	trial     []float64 // k+1
	step      mat.VecDense
	chol      mat.Cholesky
	buf       fastmat.Buf
}

func newPoissonSolver(k int) *poissonSolver {
	return &poissonSolver{
		k: k, r: make([]float64, k*k), rt: make([]float64, k*k),
		x: make([]float64, poissonChunk*k), xt: make([]float64, poissonChunk*k), xl: make([]float64, poissonChunk*k),
		eta: make([]float64, poissonChunk), w: make([]float64, k),
		h: make([]float64, k*k), tmp: make([]float64, k*k), gx: make([]float64, k),
		a: make([]float64, (k+1)*(k+1)), grad: make([]float64, k+1),
		theta: make([]float64, k+1), trial: make([]float64, k+1),
	}
}

// setFactor takes R (k×k, row-major).
func (s *poissonSolver) setFactor(r []float64) {
	copy(s.r, r)
	fastmat.Transpose(s.k, s.k, s.r, s.k, s.rt, s.k)
}

// filter writes w = R v for θ = (b, v) into s.w.
func (s *poissonSolver) filter(theta []float64) {
	k := s.k
	v := theta[1:]
	for i := range k {
		var acc float64
		for j, rv := range s.r[i*k : (i+1)*k] {
			acc += rv * v[j]
		}
		s.w[i] = acc
	}
}

// chunkEta builds rows from…from+n−1 into s.x and writes η = b + x·w.
func (s *poissonSolver) chunkEta(d poissonDesign, b float64, from, n int) {
	k := s.k
	d.rowsTo(s.x[:n*k], from, n)
	for r := range n {
		acc := b
		for i, xv := range s.x[r*k : (r+1)*k] {
			acc += xv * s.w[i]
		}
		s.eta[r] = acc
	}
}

// logPosterior is L at θ = (b, v); −Inf where a rate overflows.
func (s *poissonSolver) logPosterior(p *poissonData, theta []float64) float64 {
	s.filter(theta)
	b := theta[0]
	var rate float64
	T := p.design.bins()
	for from := 0; from < T; from += poissonChunk {
		n := min(poissonChunk, T-from)
		s.chunkEta(p.design, b, from, n)
		for _, e := range s.eta[:n] {
			rate += math.Exp(e)
		}
	}
	return s.closedTerms(p, theta, rate)
}

// closedTerms completes L from Σ_t exp(η_t): b·Σy + wᵀΣyx − Σe^η −
// Σ log y! − ½ vᵀv, with s.w = R v.
func (s *poissonSolver) closedTerms(p *poissonData, theta []float64, rate float64) float64 {
	if math.IsInf(rate, 1) || math.IsNaN(rate) {
		return math.Inf(-1)
	}
	l := theta[0]*p.sy - rate - p.logFac
	for i, v := range s.w {
		l += v * p.xy[i]
	}
	for _, v := range theta[1:] {
		l -= v * v / 2
	}
	return l
}

// derivatives returns L at θ and writes the gradient into s.grad and the
// negative Hessian into s.a.
func (s *poissonSolver) derivatives(p *poissonData, theta []float64) float64 {
	k := s.k
	s.filter(theta)
	clear(s.h)
	clear(s.gx)
	var rate float64
	T := p.design.bins()
	for from := 0; from < T; from += poissonChunk {
		n := min(poissonChunk, T-from)
		s.chunkEta(p.design, theta[0], from, n)
		for r := range n {
			lam := math.Exp(s.eta[r])
			rate += lam
			row := s.x[r*k : (r+1)*k]
			scaled := s.xl[r*k : (r+1)*k]
			for i, xv := range row {
				scaled[i] = lam * xv
			}
			for i, v := range scaled {
				s.gx[i] += v
			}
		}
		transposeBlocked(s.xt, s.x, n, k)
		// H += Xᵀ diag(λ) X, by block rows of poissonBlock, each up to
		// its diagonal: the lower triangle and a little more, 0.57 of the
		// full product at k = 294.
		for i0 := 0; i0 < k; i0 += poissonBlock {
			i1 := min(i0+poissonBlock, k)
			s.buf.MulAdd(i1-i0, i1, n, 1, s.xt[i0*n:], n, s.xl, k, s.h[i0*k:], k)
		}
	}
	for i := range k {
		for j := i + 1; j < k; j++ {
			s.h[i*k+j] = s.h[j*k+i]
		}
	}
	l := s.closedTerms(p, theta, rate)
	// tmp = H R, then the v block RᵀHR + I into a.
	clear(s.tmp)
	s.buf.MulAdd(k, k, k, 1, s.h, k, s.r, k, s.tmp, k)
	clear(s.h)
	s.buf.MulAdd(k, k, k, 1, s.rt, k, s.tmp, k, s.h, k)
	m := k + 1
	s.a[0] = rate
	s.grad[0] = p.sy - rate
	for i := range k {
		var rgx, rres float64
		for j := range k {
			rgx += s.rt[i*k+j] * s.gx[j]
			rres += s.rt[i*k+j] * (p.xy[j] - s.gx[j])
		}
		s.a[1+i], s.a[(1+i)*m] = rgx, rgx
		s.grad[1+i] = rres - theta[1+i]
		for j := i; j < k; j++ {
			v := 0.5 * (s.h[i*k+j] + s.h[j*k+i])
			if i == j {
				v++
			}
			s.a[(1+i)*m+1+j], s.a[(1+j)*m+1+i] = v, v
		}
	}
	return l
}

// transposeBlocked writes the transpose of the rows×cols matrix src into dst
// (cols×rows), in 16×16 tiles so that both sides stay in cache.
func transposeBlocked(dst, src []float64, rows, cols int) {
	const tile = 16
	for r0 := 0; r0 < rows; r0 += tile {
		r1 := min(r0+tile, rows)
		for c0 := 0; c0 < cols; c0 += tile {
			c1 := min(c0+tile, cols)
			for r := r0; r < r1; r++ {
				row := src[r*cols+c0 : r*cols+c1]
				for j, v := range row {
					dst[(c0+j)*rows+r] = v
				}
			}
		}
	}
}

// poissonResult is the outcome of poissonSolver.solve.
type poissonResult struct {
	theta        []float64 // b, v (a copy)
	w            []float64 // R v (a copy)
	logPosterior float64
	iterations   int
	converged    bool
}

// errPoissonData is returned for a unit that cannot be fitted.
var errPoissonData = errors.New("online: Poisson refinement: no bins or no spikes")

// solve maximises L by Newton's method with backtracking (see the comment
// at the top of the file).
func (s *poissonSolver) solve(p *poissonData, opt PoissonOptions) (poissonResult, error) {
	opt = opt.withDefaults()
	T := p.design.bins()
	if T < 2 || !(p.sy > 0) || p.design.dim() != s.k || len(p.xy) != s.k {
		return poissonResult{}, errPoissonData
	}
	const armijo = 1e-4
	const halvings = 50
	clear(s.theta)
	s.theta[0] = math.Log(p.sy / float64(T))
	m := s.k + 1
	res := poissonResult{}
	for res.iterations < opt.MaxIterations {
		l := s.derivatives(p, s.theta)
		if math.IsInf(l, 0) || math.IsNaN(l) {
			return res, fmt.Errorf("online: Poisson refinement: log posterior %v", l)
		}
		res.logPosterior = l
		if !s.chol.Factorize(mat.NewSymDense(m, s.a)) {
			return res, errors.New("online: Poisson refinement: the Newton matrix is not positive definite")
		}
		if err := s.chol.SolveVecTo(&s.step, mat.NewVecDense(m, s.grad)); err != nil {
			return res, fmt.Errorf("online: Poisson refinement: %w", err)
		}
		var dec2 float64
		for i, g := range s.grad {
			dec2 += g * s.step.AtVec(i)
		}
		if !(dec2 >= 0) {
			return res, fmt.Errorf("online: Poisson refinement: Newton decrement %v", dec2)
		}
		last := dec2/2 <= opt.Tolerance*max(1, math.Abs(l))
		t, accepted := 1.0, false
		var lt float64
		for range halvings {
			for i := range m {
				s.trial[i] = s.theta[i] + t*s.step.AtVec(i)
			}
			lt = s.logPosterior(p, s.trial)
			if lt >= l+armijo*t*dec2 || (last && lt >= l-1e-12*max(1, math.Abs(l))) {
				accepted = true
				break
			}
			t /= 2
		}
		if !accepted {
			res.converged = last
			break
		}
		copy(s.theta, s.trial)
		res.logPosterior = lt
		res.iterations++
		if last {
			res.converged = true
			break
		}
	}
	s.filter(s.theta)
	res.theta = append([]float64(nil), s.theta...)
	res.w = append([]float64(nil), s.w...)
	return res, nil
}
