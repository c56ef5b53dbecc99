package online

import (
	"encoding/json"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// poissonGolden is testdata/golden/poisson_map.json, written by
// testdata/golden/poisson_map.py: the log posterior from the formulas in
// numpy/scipy and the MAP found by scipy.optimize.minimize (Newton-CG with
// the analytic gradient and Hessian).
type poissonGolden struct {
	X                 [][]float64 `json:"x"`
	Y                 []float64   `json:"y"`
	C                 [][]float64 `json:"c"`
	BFixed            float64     `json:"b_fixed"`
	WFixed            []float64   `json:"w_fixed"`
	LogPosteriorFixed float64     `json:"log_posterior_fixed"`
	MapB              float64     `json:"map_b"`
	MapW              []float64   `json:"map_w"`
	MapLogPosterior   float64     `json:"map_log_posterior"`
	MapGradNorm       float64     `json:"map_grad_norm"`
	Window            PriorWindow `json:"window"`
	Hyper             SmoothLocal `json:"hyper"`
	WindowCov         [][]float64 `json:"window_cov"`
	Unit              struct {
		Width, Height, Lags int
		Frames              [][]float64 `json:"frames"`
		Counts              []float64   `json:"counts"`
		Window              PriorWindow `json:"window"`
		Hyper               SmoothLocal `json:"hyper"`
		Indices             []int       `json:"indices"`
		MapB                float64     `json:"map_b"`
		MapW                []float64   `json:"map_w"`
		MapLogPosterior     float64     `json:"map_log_posterior"`
	} `json:"unit"`
}

func loadPoissonGolden(t *testing.T) poissonGolden {
	t.Helper()
	b, err := os.ReadFile(filepath.Join("..", "testdata", "golden", "poisson_map.json"))
	if err != nil {
		t.Fatal(err)
	}
	var g poissonGolden
	if err := json.Unmarshal(b, &g); err != nil {
		t.Fatal(err)
	}
	return g
}

// denseDesign is a design held as a dense matrix (tests only).
type denseDesign [][]float64

func (d denseDesign) bins() int { return len(d) }
func (d denseDesign) dim() int  { return len(d[0]) }
func (d denseDesign) rowsTo(dst []float64, from, n int) {
	k := d.dim()
	for r := range n {
		copy(dst[r*k:(r+1)*k], d[from+r])
	}
}

// poissonGoldenProblem builds the golden data set's problem and the lower Cholesky
// factor R of its prior covariance (C = RRᵀ, gonum).
func poissonGoldenProblem(t *testing.T, g poissonGolden) (*poissonData, *mat.TriDense) {
	t.Helper()
	k := len(g.C)
	p := &poissonData{design: denseDesign(g.X), xy: make([]float64, k)}
	for i, row := range g.X {
		for j, v := range row {
			p.xy[j] += g.Y[i] * v
		}
		p.sy += g.Y[i]
		p.logFac += logFactorial(g.Y[i])
	}
	c := mat.NewSymDense(k, nil)
	for i := range k {
		for j := range k {
			c.SetSym(i, j, g.C[i][j])
		}
	}
	var ch mat.Cholesky
	if !ch.Factorize(c) {
		t.Fatal("golden C is not positive definite")
	}
	var l mat.TriDense
	ch.LTo(&l)
	return p, &l
}

func solverFor(l *mat.TriDense) *poissonSolver {
	k, _ := l.Dims()
	s := newPoissonSolver(k)
	r := make([]float64, k*k)
	for i := range k {
		for j := range k {
			r[i*k+j] = l.At(i, j)
		}
	}
	s.setFactor(r)
	return s
}

func relErr(got, want float64) float64 { return math.Abs(got-want) / math.Max(1, math.Abs(want)) }

func TestPoissonLogPosteriorGolden(t *testing.T) {
	g := loadPoissonGolden(t)
	p, l := poissonGoldenProblem(t, g)
	s := solverFor(l)
	// v = R⁻¹w, so that −½vᵀv = −½wᵀC⁻¹w.
	var v mat.VecDense
	if err := v.SolveVec(l, mat.NewVecDense(len(g.WFixed), append([]float64(nil), g.WFixed...))); err != nil {
		t.Fatal(err)
	}
	theta := append([]float64{g.BFixed}, v.RawVector().Data...)
	// Source: the formula in numpy/scipy (poisson_map.py), to 1e-8 relative.
	if got := s.logPosterior(p, theta); relErr(got, g.LogPosteriorFixed) > 1e-8 {
		t.Errorf("log posterior %.12g, numpy %.12g", got, g.LogPosteriorFixed)
	}
	if got := s.derivatives(p, theta); relErr(got, g.LogPosteriorFixed) > 1e-8 {
		t.Errorf("log posterior of the Newton pass %.12g, numpy %.12g", got, g.LogPosteriorFixed)
	}
}

func TestPoissonMAPGolden(t *testing.T) {
	g := loadPoissonGolden(t)
	p, l := poissonGoldenProblem(t, g)
	s := solverFor(l)
	res, err := s.solve(p, PoissonOptions{})
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("%d Newton steps, converged %v, b %.12g (scipy %.12g)", res.iterations, res.converged, res.theta[0], g.MapB)
	if !res.converged || res.iterations < 2 || res.iterations > 20 {
		t.Errorf("converged %v after %d iterations", res.converged, res.iterations)
	}
	// Source: scipy.optimize.minimize (Newton-CG, analytic derivatives),
	// whose gradient norm at its optimum is MapGradNorm (< 1e-8). The
	// distance between the two optima is about that norm over the smallest
	// eigenvalue of the negative Hessian (the prior's C⁻¹ plus the curvature
	// of 400 bins of counts: 100, by numpy at scipy's optimum), so 1e-9
	// leaves a wide margin.
	const tol = 1e-9
	if d := math.Abs(res.theta[0] - g.MapB); d > tol {
		t.Errorf("b = %.10g, scipy %.10g", res.theta[0], g.MapB)
	}
	for i, w := range g.MapW {
		if d := math.Abs(res.w[i] - w); d > tol {
			t.Errorf("w[%d] = %.10g, scipy %.10g", i, res.w[i], w)
		}
	}
	if relErr(res.logPosterior, g.MapLogPosterior) > 1e-10 {
		t.Errorf("log posterior at the MAP %.14g, scipy %.14g", res.logPosterior, g.MapLogPosterior)
	}
}

// The factor of the smooth-local prior against its covariance built entry
// by entry in numpy (poisson_map.py; the model of Sahani & Linden 2003 and
// Park & Pillow 2011): R Rᵀ = C.
func TestPoissonPriorFactorGolden(t *testing.T) {
	g := loadPoissonGolden(t)
	r, err := priorFactor(g.Hyper, g.Window, 1)
	if err != nil {
		t.Fatal(err)
	}
	k := g.Window.Size()
	if len(g.WindowCov) != k {
		t.Fatalf("golden covariance %d, window %d", len(g.WindowCov), k)
	}
	for i := range k {
		for j := range k {
			var c float64
			for m := range k {
				c += r[i*k+m] * r[j*k+m]
			}
			if math.Abs(c-g.WindowCov[i][j]) > 1e-10 {
				t.Errorf("C[%d][%d] = %.12g, numpy %.12g", i, j, c, g.WindowCov[i][j])
			}
		}
	}
}

func TestPoissonUnfittable(t *testing.T) {
	s, err := NewBinStore(4, 4, 2)
	if err != nil {
		t.Fatal(err)
	}
	frame := make([]float64, 16)
	for k := range 20 {
		frame[k%16] = 1
		if err := s.Add(frame, []Count{{Unit: 0, N: 0}}, k > 0); err != nil {
			t.Fatal(err)
		}
	}
	h := SmoothLocal{Scale: 1, Noise: 1, Length: [3]float64{1, 1, 1}, Centre: [3]float64{1, 1, 0}, Width: [3]float64{1, 1, 1}}
	win := PriorWindow{NX: 2, NY: 2, NT: 2}
	cases := []struct {
		name string
		u    PoissonUnit
	}{
		{"no spikes", PoissonUnit{Unit: 0, Hyper: h, Window: win}},
		{"unknown unit", PoissonUnit{Unit: 7, Hyper: h, Window: win}},
		{"window past the lags", PoissonUnit{Unit: 0, Hyper: h, Window: PriorWindow{NX: 2, NY: 2, NT: 3}}},
		{"empty window", PoissonUnit{Unit: 0, Hyper: h}},
		{"zero scale", PoissonUnit{Unit: 0, Hyper: SmoothLocal{}, Window: win}},
	}
	units := make([]PoissonUnit, len(cases))
	for i, c := range cases {
		units[i] = c.u
	}
	_, errs := s.PoissonMAPAll(units, PoissonOptions{Workers: 2})
	for i, c := range cases {
		if errs[i] == nil {
			t.Errorf("%s: no error", c.name)
		}
	}
}

// The store's rows are the lagged frames (common practice, no source: the
// design of a linear filter on a stimulus history), whether the frames are
// kept as palette codes of 1 to 8 bits (repacked as the palette grows) or,
// past 256 values, as float64; a unit given twice in a bin has its counts
// added.
func TestBinStoreRows(t *testing.T) {
	const w, h, lags = 3, 2, 3
	cases := []struct {
		name  string
		value func(r *rand.Rand, k int) float64
		bits  int // 0: float64
	}{
		{"binary", func(r *rand.Rand, _ int) float64 { return float64(2*r.IntN(2) - 1) }, 1},
		{"ternary", func(r *rand.Rand, _ int) float64 { return float64(r.IntN(3) - 1) }, 2},
		{"palette growing to 40 values", func(r *rand.Rand, k int) float64 { return float64(r.IntN(1 + k*40/100)) }, 8},
		{"gaussian", func(r *rand.Rand, _ int) float64 { return r.NormFloat64() }, 0},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			rng := rand.New(rand.NewPCG(5, 6))
			s, err := NewBinStore(w, h, lags)
			if err != nil {
				t.Fatal(err)
			}
			var frames [][]float64
			for k := range 100 {
				f := make([]float64, w*h)
				for i := range f {
					f[i] = c.value(rng, k)
				}
				frames = append(frames, f)
				used := k >= lags-1
				if err := s.Add(f, []Count{{Unit: 3, N: 1}, {Unit: 3, N: 2}}, used); err != nil {
					t.Fatal(err)
				}
			}
			if bits := s.bits * btoi(s.wide == nil); bits != c.bits {
				t.Fatalf("%d bits per code, want %d (0: float64)", bits, c.bits)
			}
			win := PriorWindow{X0: 1, Y0: 0, T0: 1, NX: 2, NY: 2, NT: 2}
			d := s.windowDesign(win)
			if d.bins() != 100-(lags-1) {
				t.Fatalf("%d bins", d.bins())
			}
			row := make([]float64, win.Size())
			for bin := range d.bins() {
				d.rowsTo(row, bin, 1)
				i := 0
				for l := range win.NT {
					for y := range win.NY {
						for x := range win.NX {
							want := frames[bin+lags-1-(win.T0+l)][(win.Y0+y)*w+win.X0+x]
							if row[i] != want {
								t.Fatalf("bin %d coefficient %d: %v, want %v", bin, i, row[i], want)
							}
							i++
						}
					}
				}
			}
			u := s.units[3]
			if len(u.bins) != d.bins() || u.at(0) != 3 || u.sum != 3*float64(d.bins()) || math.Abs(u.logFac-float64(d.bins())*math.Log(6)) > 1e-9 {
				t.Errorf("first count %v, sum %v, Σlog y! %v", u.at(0), u.sum, u.logFac)
			}
		})
	}
}

// PoissonMAPAll gives every unit the fit PoissonMAP gives it alone, whatever
// the number of workers (common practice, no source: determinism).
func TestPoissonMAPAllMatchesOne(t *testing.T) {
	rng := rand.New(rand.NewPCG(8, 9))
	s, err := NewBinStore(4, 4, 2)
	if err != nil {
		t.Fatal(err)
	}
	for k := range 600 {
		f := make([]float64, 16)
		for i := range f {
			f[i] = float64(2*rng.IntN(2) - 1)
		}
		counts := []Count{{Unit: 0, N: float64(rng.IntN(3))}, {Unit: 1, N: float64(rng.IntN(2))}}
		if err := s.Add(f, counts, k > 0); err != nil {
			t.Fatal(err)
		}
	}
	h := SmoothLocal{Scale: 0.05, Noise: 1, Length: [3]float64{1, 1, 1}, Centre: [3]float64{1.5, 1.5, 0.5}, Width: [3]float64{2, 2, 1}}
	units := []PoissonUnit{
		{Unit: 0, Hyper: h, Window: PriorWindow{NX: 3, NY: 3, NT: 2}},
		{Unit: 1, Hyper: h, Window: PriorWindow{X0: 1, Y0: 1, NX: 3, NY: 3, NT: 2}},
		{Unit: 0, Hyper: h, Window: PriorWindow{NX: 4, NY: 4, NT: 1}},
	}
	fits, errs := s.PoissonMAPAll(units, PoissonOptions{Workers: 2})
	for i, u := range units {
		one, err := s.PoissonMAP(u, PoissonOptions{})
		if err != nil || errs[i] != nil {
			t.Fatalf("unit %d: %v, %v", i, err, errs[i])
		}
		if one.LogPosterior != fits[i].LogPosterior || one.Iterations != fits[i].Iterations {
			t.Errorf("unit %d: alone L %v in %d steps, with workers L %v in %d", i, one.LogPosterior, one.Iterations, fits[i].LogPosterior, fits[i].Iterations)
		}
	}
}

func btoi(b bool) int {
	if b {
		return 1
	}
	return 0
}

// Counts are kept in a byte while they are whole numbers up to 255, and as
// float64 from the first one that is not, without changing any (common
// practice, no source).
func TestBinStoreCounts(t *testing.T) {
	s, err := NewBinStore(2, 1, 1)
	if err != nil {
		t.Fatal(err)
	}
	want := []float64{1, 255, 300, 0.5, 2}
	for _, n := range want {
		if err := s.Add([]float64{1, -1}, []Count{{Unit: 0, N: n}}, true); err != nil {
			t.Fatal(err)
		}
	}
	u := s.units[0]
	var sum float64
	for k, n := range want {
		if u.at(k) != n {
			t.Errorf("count %d: %v, want %v", k, u.at(k), n)
		}
		sum += n
	}
	if u.sum != sum || u.wide == nil {
		t.Errorf("sum %v (want %v), float64 storage %v", u.sum, sum, u.wide != nil)
	}
	if err := s.Add([]float64{1, -1}, []Count{{Unit: 0, N: math.NaN()}}, true); err == nil {
		t.Error("a NaN count was taken")
	}
}

// One unit's whole refinement through the public API, from frames and
// counts in a BinStore, against scipy's MAP of the same model written
// densely in numpy (poisson_map.py: the window's lagged design, the
// smooth-local covariance over the squared mean count, Newton-CG): the
// weights at the window's indices, the intercept and the log posterior.
func TestPoissonStoreGolden(t *testing.T) {
	g := loadPoissonGolden(t).Unit
	s, err := NewBinStore(g.Width, g.Height, g.Lags)
	if err != nil {
		t.Fatal(err)
	}
	for k, f := range g.Frames {
		used := k >= g.Lags-1
		var counts []Count
		if used {
			counts = []Count{{Unit: 0, N: g.Counts[k-(g.Lags-1)]}}
		}
		if err := s.Add(f, counts, used); err != nil {
			t.Fatal(err)
		}
	}
	fit, err := s.PoissonMAP(PoissonUnit{Unit: 0, Hyper: g.Hyper, Window: g.Window}, PoissonOptions{})
	if err != nil {
		t.Fatal(err)
	}
	// scipy's gradient norm (≈1e-9) over the Newton matrix's smallest
	// eigenvalue (≈120) bounds the distance of the optima near 1e-11.
	const tol = 1e-9
	if !fit.Converged || math.Abs(fit.Intercept-g.MapB) > tol {
		t.Errorf("converged %v, b = %.12g, scipy %.12g", fit.Converged, fit.Intercept, g.MapB)
	}
	inside := map[int]bool{}
	for i, a := range g.Indices {
		inside[a] = true
		if math.Abs(fit.Weights[a]-g.MapW[i]) > tol {
			t.Errorf("w[%d] = %.12g, scipy %.12g", a, fit.Weights[a], g.MapW[i])
		}
	}
	for a, v := range fit.Weights {
		if !inside[a] && v != 0 {
			t.Errorf("w[%d] = %v outside the window", a, v)
		}
	}
	if relErr(fit.LogPosterior, g.MapLogPosterior) > 1e-10 {
		t.Errorf("log posterior %.14g, scipy %.14g", fit.LogPosterior, g.MapLogPosterior)
	}
}
