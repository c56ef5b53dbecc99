package online

import (
	"errors"
	"fmt"
	"math"
	"sync/atomic"

	"gonum.org/v1/gonum/mat"

	"livefield/online/internal/fastmat"
)

// The smooth-local estimate: the posterior mean of a linear-Gaussian model
// whose prior on the filter says that receptive fields are smooth and local
// in space and time, with the prior's hyperparameters chosen per unit by
// maximising the log evidence (empirical Bayes).
//
// # Model
//
// On centred data ỹ = X̃w + ε, ε ~ N(0, σ²I), w ~ N(0, C), with a flat
// intercept integrated out (n′ = n − 1 degrees of freedom). Each coefficient
// i has coordinates χ_i = (x, y, t): pixel column, pixel row, lag. The prior
// covariance is
//
//	C = s · E^½ K E^½,
//	K_ij = exp(−Σ_d (χ_id − χ_jd)² / (2δ_d²))          smoothness,
//	E_ii = exp(−½ Σ_d (χ_id − ν_d)² / ψ_d²)             locality,
//
// the squared-exponential smoothness kernel of automatic smoothness
// determination (Sahani & Linden 2003, NIPS 15) with one length δ_d per axis,
// times the Gaussian envelope of automatic locality determination in
// space-time (Park & Pillow 2011, PLoS Comput Biol 7(10): e1002219) with
// centre ν and a diagonal covariance diag(ψ²), and an overall scale s. The
// hyperparameters are s, σ², δ (3), ν (3) and ψ (3).
//
// # Evidence
//
// With G = X̃ᵀX̃, c = X̃ᵀỹ, q = ỹᵀỹ (sufficient statistics, no pass over the
// data) and a = s/σ², factor C = σ²a·LLᵀ with L = E^½ K^½, where K^½ =
// K_t^½ ⊗ K_y^½ ⊗ K_x^½ is the symmetric square root of the separable kernel
// on the window's grid, taken axis by axis (negative round-off eigenvalues
// clamped to zero). Then with B = I + a·LᵀGL (eigenvalues ≥ 1):
//
//	posterior mean  μ = a·L B⁻¹ Lᵀc,
//	log evidence    = −½ n′ log(2πσ²) − ½ log|B| − ½ (q − cᵀμ)/σ²,
//
// the matrix determinant lemma and Woodbury written with a factor of C, so
// that no C⁻¹ appears and near-zero prior variances are harmless. μ does not
// depend on σ² at fixed a, and the evidence is maximised over σ² by
// σ̂² = (q − cᵀμ)/n′; the optimiser works on this profile,
// −½ n′ (log(2πσ̂²) + 1) − ½ log|B|, over the other ten hyperparameters.
//
// # Where
//
// Coefficients far outside the envelope have prior variance near zero, so
// each unit's problem is restricted to a window: a box of pixels around the
// field's centre times the lags that carry it, taken from the shared Gram
// matrix (GramView.WindowTo). Weights outside the window are zero.

// SmoothLocal holds the hyperparameters of the smooth-local prior. Lengths,
// centre and widths are in frame coordinates: x is the pixel column, y the
// pixel row, t the lag (0 = the frame on screen during the bin).
type SmoothLocal struct {
	Scale  float64    `json:"scale"`  // s: prior variance at the envelope's centre
	Noise  float64    `json:"noise"`  // σ²: noise variance of the counts per bin
	Length [3]float64 `json:"length"` // δ: smoothness length in x, y (pixels) and t (lags)
	Centre [3]float64 `json:"centre"` // ν: envelope centre (x, y, t)
	Width  [3]float64 `json:"width"`  // ψ: envelope standard deviation in x, y, t
}

// PriorWindow is a box of coefficients: pixel columns X0…X0+NX−1, rows
// Y0…Y0+NY−1 and lags T0…T0+NT−1. Inside the window coefficients are
// ordered like the full layout: lag, then row, then column.
type PriorWindow struct {
	X0 int `json:"x0"`
	Y0 int `json:"y0"`
	T0 int `json:"t0"`
	NX int `json:"nx"`
	NY int `json:"ny"`
	NT int `json:"nt"`
}

// Size is the number of coefficients in the window.
func (w PriorWindow) Size() int { return w.NX * w.NY * w.NT }

// Indices returns, for every window coefficient in window order, its index
// in the full lag-major layout of a width×height frame.
func (w PriorWindow) Indices(width, height int) []int {
	idx := make([]int, 0, w.Size())
	for t := range w.NT {
		for y := range w.NY {
			for x := range w.NX {
				idx = append(idx, ((w.T0+t)*height+w.Y0+y)*width+w.X0+x)
			}
		}
	}
	return idx
}

// priorProblem is one unit's linear-Gaussian problem in a window, with the
// scratch to evaluate the evidence without allocating.
type priorProblem struct {
	win  PriorWindow
	k    int       // window size
	gram []float64 // k×k centred Gram matrix, row-major
	c    []float64 // centred cross-correlation in the window
	q    float64   // centred Σ(y − ȳ)²
	n    int       // bins

	// Scratch.
	root  [3][]float64 // per-axis symmetric square roots of the kernels (x, y, t)
	sqE   []float64    // E^½ diagonal
	m     []float64    // k×k: LᵀGL, then B, then its Cholesky factor
	tmp   []float64    // k×k
	line  []float64    // longest axis
	z, zt []float64    // k
	mu    []float64    // k: posterior mean of the last evaluation
	kbuf  []float64    // k×k, for kronRows
	tr    []float64    // cholBlock×k, for cholesky
	buf   fastmat.Buf
	vb    []float64 // k, for kronVec
	eig   mat.EigenSym

	// The last M = K^½ E^½ G E^½ K^½ (lower triangle) and what it was formed
	// for: evaluations that change only a = s/σ² (the scale probes, the
	// search's steps in log a) reuse it, and the kernel roots and the
	// envelope, which are then still those of its key. Any change of the
	// data (gram) must clear mValid.
	mc     []float64
	mKey   priorMKey
	mValid bool

	// pause, when set and true, asks an evaluation to stop at its next
	// checkpoint with errPaused (see updateGate).
	pause  *atomic.Bool
	formed int // Ms formed so far (BenchmarkPriorRound)
}

// priorMKey is what M depends on besides the data: the window and every
// hyperparameter but the scale and the noise.
type priorMKey struct {
	win                   PriorWindow
	length, centre, width [3]float64
}

func newPriorProblem(win PriorWindow) *priorProblem {
	k := win.Size()
	p := &priorProblem{win: win, k: k}
	p.gram = make([]float64, k*k)
	p.c = make([]float64, k)
	p.sqE = make([]float64, k)
	p.m = make([]float64, k*k)
	p.mc = make([]float64, k*k)
	p.tmp = make([]float64, k*k)
	p.line = make([]float64, max(win.NX, win.NY, win.NT))
	p.z = make([]float64, k)
	p.zt = make([]float64, k)
	p.mu = make([]float64, k)
	p.tr = make([]float64, cholBlock*k)
	for d, n := range [3]int{win.NX, win.NY, win.NT} {
		p.root[d] = make([]float64, n*n)
	}
	return p
}

// errPriorData is returned for statistics that cannot give an evidence.
var errPriorData = errors.New("online: smooth-local prior: too few bins or no variance")

// evaluation is the outcome of one evidence evaluation.
type evaluation struct {
	logEv float64 // log evidence
	noise float64 // σ² used (σ̂² when profiled)
	cmu   float64 // cᵀμ
}

// evaluate computes the posterior mean (into p.mu) and the log evidence at
// h. With profile set, h.Noise only fixes the ratio a = Scale/Noise and the
// noise variance is the evidence-maximising σ̂².
func (p *priorProblem) evaluate(h SmoothLocal, profile bool) (evaluation, error) {
	if p.n < 3 || !(p.q > 0) {
		return evaluation{}, errPriorData
	}
	if !(h.Scale >= 0) || !(h.Noise > 0) || math.IsInf(h.Scale, 0) || math.IsInf(h.Noise, 0) {
		return evaluation{}, fmt.Errorf("online: smooth-local prior: scale %g and noise %g", h.Scale, h.Noise)
	}
	for d := range 3 {
		if !(h.Length[d] > 0) || !(h.Width[d] > 0) || math.IsNaN(h.Centre[d]) {
			return evaluation{}, fmt.Errorf("online: smooth-local prior: length %v, width %v, centre %v", h.Length, h.Width, h.Centre)
		}
	}
	k := p.k
	a := h.Scale / h.Noise
	key := priorMKey{win: p.win, length: h.Length, centre: h.Centre, width: h.Width}
	if !p.mValid || key != p.mKey {
		p.mValid = false
		if err := p.formM(h); err != nil {
			return evaluation{}, err
		}
		p.mKey, p.mValid = key, true
	}
	if p.paused() {
		return evaluation{}, errPaused
	}
	// B = I + a·M on the lower triangle (all that cholesky reads), then
	// its Cholesky factor (lower).
	for r := range k {
		row, src := p.m[r*k:r*k+r+1], p.mc[r*k:r*k+r+1]
		for c, v := range src {
			row[c] = a * v
		}
		row[r]++
	}
	if !cholesky(p.m, k, p.tr, &p.buf, p.pause) {
		if p.paused() {
			return evaluation{}, errPaused
		}
		return evaluation{}, errors.New("online: smooth-local prior: I + a·LᵀGL is not positive definite")
	}
	return p.finish(a, profile, h)
}

// errPaused is an evaluation given up because an update asked for the cores
// (updateGate); it is redone afterwards.
var errPaused = errors.New("online: smooth-local prior: evaluation paused for an update")

// paused reports whether an update asks the evaluation to stop.
func (p *priorProblem) paused() bool { return p.pause != nil && p.pause.Load() }

// formM writes M = K^½ E^½ G E^½ K^½ into p.mc (its lower triangle is
// read), with the kernel roots and the envelope of h.
func (p *priorProblem) formM(h SmoothLocal) error {
	p.formed++
	k, w := p.k, p.win
	// Per-axis kernel square roots.
	sizes := [3]int{w.NX, w.NY, w.NT}
	for d := range 3 {
		if err := p.kernelRoot(d, sizes[d], h.Length[d]); err != nil {
			return err
		}
	}
	p.envelope(h)
	// m = Lᵀ G L = K^½ (E^½ G E^½) K^½.
	for r := range k {
		for c := range k {
			p.tmp[r*k+c] = p.sqE[r] * p.gram[r*k+c] * p.sqE[c]
		}
	}
	p.kronRows(p.tmp)
	if p.paused() {
		return errPaused
	}
	fastmat.Transpose(k, k, p.tmp, k, p.m, k)
	p.kronRows(p.m)
	// M is symmetric up to rounding; its lower triangle is the one used.
	p.m, p.mc = p.mc, p.m
	return nil
}

// finish completes an evaluation from the Cholesky factor of B in p.m: the
// log determinant, the posterior mean and the log evidence.
func (p *priorProblem) finish(a float64, profile bool, h SmoothLocal) (evaluation, error) {
	k := p.k
	var logDet float64
	for r := range k {
		logDet += 2 * math.Log(p.m[r*k+r])
	}
	// z = Lᵀc = K^½ (E^½ c); zt = B⁻¹ z.
	for r := range k {
		p.zt[r] = p.sqE[r] * p.c[r]
	}
	p.kronVec(p.z, p.zt)
	copy(p.zt, p.z)
	cholSolve(p.m, k, p.zt)
	var cmu float64
	for r := range k {
		cmu += p.z[r] * p.zt[r]
	}
	cmu *= a
	// μ = a·E^½ K^½ zt.
	p.kronVec(p.mu, p.zt)
	for r := range k {
		p.mu[r] *= a * p.sqE[r]
	}
	nn := float64(p.n - 1)
	res := p.q - cmu
	if !(res > 0) {
		res = p.q * 1e-12 // a perfect fit: keep the profile finite
	}
	if profile {
		s2 := res / nn
		return evaluation{logEv: -0.5*nn*(math.Log(2*math.Pi*s2)+1) - 0.5*logDet, noise: s2, cmu: cmu}, nil
	}
	s2 := h.Noise
	return evaluation{logEv: -0.5*nn*math.Log(2*math.Pi*s2) - 0.5*logDet - 0.5*res/s2, noise: s2, cmu: cmu}, nil
}

// envelope writes E^½, the square root of the locality envelope at h, into
// p.sqE.
func (p *priorProblem) envelope(h SmoothLocal) {
	w := p.win
	off := [3]int{w.X0, w.Y0, w.T0}
	i := 0
	for t := range w.NT {
		et := sqNorm(float64(off[2]+t), h.Centre[2], h.Width[2])
		for y := range w.NY {
			ey := sqNorm(float64(off[1]+y), h.Centre[1], h.Width[1])
			for x := range w.NX {
				ex := sqNorm(float64(off[0]+x), h.Centre[0], h.Width[0])
				p.sqE[i] = math.Exp(-(ex + ey + et) / 4)
				i++
			}
		}
	}
}

// sqNorm is (v − c)²/w².
func sqNorm(v, c, w float64) float64 {
	d := (v - c) / w
	return d * d
}

// kernelRoot writes the symmetric square root of the n×n squared-exponential
// kernel of length delta on the grid 0…n−1 into p.root[axis].
func (p *priorProblem) kernelRoot(axis, n int, delta float64) error {
	dst := p.root[axis]
	ker := mat.NewSymDense(n, nil)
	for i := range n {
		for j := i; j < n; j++ {
			d := float64(i-j) / delta
			ker.SetSym(i, j, math.Exp(-d*d/2))
		}
	}
	if !p.eig.Factorize(ker, true) {
		return errors.New("online: smooth-local prior: kernel eigendecomposition failed")
	}
	vals := p.eig.Values(nil)
	var vecs mat.Dense
	p.eig.VectorsTo(&vecs)
	clear(dst)
	for e, lam := range vals {
		if lam <= 0 {
			continue
		}
		s := math.Sqrt(lam)
		for i := range n {
			vi := vecs.At(i, e) * s
			for j := range n {
				dst[i*n+j] += vi * vecs.At(j, e)
			}
		}
	}
	return nil
}

// kronRows replaces the k×k matrix a by (K_t^½ ⊗ K_y^½ ⊗ K_x^½)·a, one axis at
// a time, each as a few products on the package's matrix kernel:
// O(k²·(NX + NY + NT)).
func (p *priorProblem) kronRows(a []float64) {
	k, w := p.k, p.win
	buf := p.kronBuf()
	// x: blocks of NX consecutive rows.
	for b := 0; b < k; b += w.NX {
		kronBlock(w.NX, p.root[0], k, a[b*k:(b+w.NX)*k], buf[b*k:(b+w.NX)*k])
	}
	// y: per lag, NY rows of NX·k values.
	plane := w.NX * w.NY * k
	for t := range w.NT {
		kronBlock(w.NY, p.root[1], w.NX*k, buf[t*plane:(t+1)*plane], a[t*plane:(t+1)*plane])
	}
	// t: NT rows of NX·NY·k values.
	kronBlock(w.NT, p.root[2], plane, a, buf)
	copy(a, buf)
}

// kronBlock writes root·src into dst, src and dst being n rows of cols
// values and root n×n: every row of dst is a combination of the n rows of
// src, added four at a time by fastmat.AddScaled4. The roots are small (a
// window's side), so a general matrix product would spend its time packing
// src rather than multiplying.
func kronBlock(n int, root []float64, cols int, src, dst []float64) {
	var a [4]float64
	var rows [4][]float64
	for i := range n {
		out := dst[i*cols : (i+1)*cols]
		clear(out)
		for j := 0; j < n; j += 4 {
			for q := range 4 {
				// Past the last row: a zero coefficient on row 0.
				a[q], rows[q] = 0, src[:cols]
				if j+q < n {
					a[q], rows[q] = root[i*n+j+q], src[(j+q)*cols:(j+q+1)*cols]
				}
			}
			fastmat.AddScaled4(out, &a, &rows)
		}
	}
}

// kronBuf is a second k×k scratch for kronRows.
func (p *priorProblem) kronBuf() []float64 {
	if len(p.kbuf) != p.k*p.k {
		p.kbuf = make([]float64, p.k*p.k)
	}
	return p.kbuf
}

// kronVec writes (K_t^½ ⊗ K_y^½ ⊗ K_x^½)·v into dst (len k each; dst must not
// alias v).
func (p *priorProblem) kronVec(dst, v []float64) {
	w := p.win
	buf := p.vbuf()
	apply := func(n, stride int, root []float64, src, out []float64) {
		for base := range p.k {
			if (base/stride)%n != 0 {
				continue
			}
			for i := range n {
				var s float64
				for j := range n {
					s += root[i*n+j] * src[base+j*stride]
				}
				out[base+i*stride] = s
			}
		}
	}
	apply(w.NX, 1, p.root[0], v, dst)
	apply(w.NY, w.NX, p.root[1], dst, buf)
	apply(w.NT, w.NX*w.NY, p.root[2], buf, dst)
}

func (p *priorProblem) vbuf() []float64 {
	if len(p.vb) != p.k {
		p.vb = make([]float64, p.k)
	}
	return p.vb
}
