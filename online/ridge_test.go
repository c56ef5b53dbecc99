package online

import (
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"strings"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// ridgeGolden is testdata/golden/ridge_golden.json, written by
// testdata/golden/ridge_golden.py from scikit-learn's
// sklearn.linear_model.Ridge(fit_intercept=True) and numpy.
type ridgeGolden struct {
	Source  string `json:"source"`
	Width   int    `json:"width"`
	Height  int    `json:"height"`
	Lags    int    `json:"lags"`
	Rows    int    `json:"rows"`
	Stimuli map[string]struct {
		Frames [][]float64 `json:"frames"`
		Y      [][]float64 `json:"y"`
	} `json:"stimuli"`
	Cases []struct {
		Stimulus    string            `json:"stimulus"`
		Lambda      float64           `json:"lambda"`
		Checkpoints []ridgeCheckpoint `json:"checkpoints"`
	} `json:"cases"`
}

// ridgeCheckpoint is the reference state after the first N rows.
type ridgeCheckpoint struct {
	N         int         `json:"n"`
	Coef      [][]float64 `json:"coef"`
	Intercept []float64   `json:"intercept"`
	Objective []float64   `json:"objective"`
	PostDiag  []float64   `json:"post_diag"`
	T1        float64     `json:"t1"`
	T2        float64     `json:"t2"`
}

// checkRidgeCheckpoint compares r with a golden checkpoint: weights,
// intercept and objective of every column, the posterior diagonal and the
// hat traces, each to 1e-8 relative.
func checkRidgeCheckpoint(t *testing.T, r *Ridge, cp *ridgeCheckpoint) {
	t.Helper()
	w := make([]float64, r.Dim())
	post := make([]float64, r.Dim())
	for u := range r.Cols() {
		b := r.WeightsTo(w, u)
		if e := ridgeRelVec(w, cp.Coef[u]); e > 1e-8 {
			t.Errorf("n=%d unit %d: weights off by %.3g relative (w[0]=%v, sklearn %v)", cp.N, u, e, w[0], cp.Coef[u][0])
		}
		if e := ridgeRel(b, cp.Intercept[u]); e > 1e-8 {
			t.Errorf("n=%d unit %d: intercept %v, sklearn %v", cp.N, u, b, cp.Intercept[u])
		}
		if e := ridgeRel(r.Objective(u), cp.Objective[u]); e > 1e-8 {
			t.Errorf("n=%d unit %d: objective %v, numpy %v", cp.N, u, r.Objective(u), cp.Objective[u])
		}
	}
	r.PosteriorDiagTo(post)
	if e := ridgeRelVec(post, cp.PostDiag); e > 1e-8 {
		t.Errorf("n=%d: posterior diagonal off by %.3g relative (first %v, numpy %v)", cp.N, e, post[0], cp.PostDiag[0])
	}
	t1, t2 := r.HatTraces()
	if ridgeRel(t1, cp.T1) > 1e-8 || ridgeRel(t2, cp.T2) > 1e-8 {
		t.Errorf("n=%d: hat traces %v, %v; numpy eigenvalues give %v, %v", cp.N, t1, t2, cp.T1, cp.T2)
	}
	// The same traces from the pass that gives the sampling diagonal.
	t1, t2 = r.samplingDiagTraces(post)
	if ridgeRel(t1, cp.T1) > 1e-8 || ridgeRel(t2, cp.T2) > 1e-8 {
		t.Errorf("n=%d: hat traces beside the sampling diagonal %v, %v; numpy eigenvalues give %v, %v", cp.N, t1, t2, cp.T1, cp.T2)
	}
}

func loadRidgeGolden(t *testing.T) *ridgeGolden {
	t.Helper()
	b, err := os.ReadFile("../testdata/golden/ridge_golden.json")
	if err != nil {
		t.Fatal(err)
	}
	var g ridgeGolden
	if err := json.Unmarshal(b, &g); err != nil {
		t.Fatal(err)
	}
	return &g
}

// ridgeLagRows builds x_k = [s_k; s_{k−1}; …; s_{k−L+1}] for k = L−1 … (the
// convention of ridge_golden.py).
func ridgeLagRows(frames [][]float64, lags int) [][]float64 {
	var rows [][]float64
	for k := lags - 1; k < len(frames); k++ {
		var x []float64
		for l := range lags {
			x = append(x, frames[k-l]...)
		}
		rows = append(rows, x)
	}
	return rows
}

func ridgeRelVec(got, want []float64) float64 {
	var d, n float64
	for i := range want {
		d += (got[i] - want[i]) * (got[i] - want[i])
		n += want[i] * want[i]
	}
	if n == 0 {
		return math.Sqrt(d)
	}
	return math.Sqrt(d / n)
}

func ridgeRel(got, want float64) float64 {
	return math.Abs(got-want) / math.Max(math.Abs(want), 1e-300)
}

// ridgeBlocks is the pattern of block sizes used to feed rows: single rows,
// sizes that do not divide the checkpoints, and one larger than Dim.
var ridgeBlocks = []int{1, 7, 1, 13, 60, 2, 29, 1, 200, 37}

// TestRidgeAgainstScikitLearn streams the golden rows in blocks of varying
// size and compares every checkpoint with scikit-learn's Ridge
// (fit_intercept=True): weights and intercept to 1e-8 relative, the objective
// with numpy's RSS + λ‖w‖², the posterior diagonal with numpy.linalg.inv of
// Λ + ÃᵀÃ, and the hat traces with numpy.linalg.eigvalsh of the centred Gram
// matrix.
func TestRidgeAgainstScikitLearn(t *testing.T) {
	g := loadRidgeGolden(t)
	for ci, c := range g.Cases {
		t.Run(fmt.Sprintf("%s/lambda=%g", c.Stimulus, c.Lambda), func(t *testing.T) {
			st := g.Stimuli[c.Stimulus]
			X := ridgeLagRows(st.Frames, g.Lags)
			Y := st.Y
			dim, cols := len(X[0]), len(Y[0])
			r, err := NewRidge(dim, cols, c.Lambda)
			if err != nil {
				t.Fatal(err)
			}
			row, blk := 0, ci // start the pattern at a different place per case
			for _, cp := range c.Checkpoints {
				for row < cp.N {
					size := min(ridgeBlocks[blk%len(ridgeBlocks)], cp.N-row)
					blk++
					for range size {
						r.AddRow(X[row], Y[row])
						row++
					}
					r.Flush()
				}
				if r.Rows() != int64(cp.N) || r.Pending() != 0 {
					t.Fatalf("rows %d pending %d, want %d and 0", r.Rows(), r.Pending(), cp.N)
				}
				checkRidgeCheckpoint(t, r, &cp)
			}
			if r.Err() != nil || r.Rejected() != 0 {
				t.Errorf("unexpected error %v, %d rejected", r.Err(), r.Rejected())
			}
		})
	}
}

// ridgeDirect solves the ridge problem with a free intercept directly from
// its normal equations (Λ + ÃᵀÃ) z = ÃᵀY with gonum's Cholesky, and also
// returns (Λ + ÃᵀÃ)⁻¹.
func ridgeDirect(t *testing.T, X, Y [][]float64, lambda float64) (coef [][]float64, icpt []float64, inv *mat.SymDense) {
	t.Helper()
	n, d, u := len(X), len(X[0]), len(Y[0])
	M := mat.NewSymDense(d+1, nil)
	rhs := mat.NewDense(d+1, u, nil)
	a := make([]float64, d+1)
	for k := range n {
		copy(a, X[k])
		a[d] = 1
		for i := range d + 1 {
			for j := i; j <= d; j++ {
				M.SetSym(i, j, M.At(i, j)+a[i]*a[j])
			}
			for c := range u {
				rhs.Set(i, c, rhs.At(i, c)+a[i]*Y[k][c])
			}
		}
	}
	for i := range d {
		M.SetSym(i, i, M.At(i, i)+lambda)
	}
	var ch mat.Cholesky
	if !ch.Factorize(M) {
		t.Fatal("reference system not positive definite")
	}
	var z mat.Dense
	if err := ch.SolveTo(&z, rhs); err != nil {
		t.Fatal(err)
	}
	inv = mat.NewSymDense(d+1, nil)
	if err := ch.InverseTo(inv); err != nil {
		t.Fatal(err)
	}
	for c := range u {
		w := make([]float64, d)
		for i := range d {
			w[i] = z.At(i, c)
		}
		coef = append(coef, w)
		icpt = append(icpt, z.At(d, c))
	}
	return coef, icpt, inv
}

func ridgeRandRows(rng *rand.Rand, n, d int, f func(int) float64) [][]float64 {
	out := make([][]float64, n)
	for k := range out {
		out[k] = make([]float64, d)
		for i := range out[k] {
			out[k][i] = f(i)
		}
	}
	return out
}

// TestRidgeSetColsMidStream grows the columns while rows are pending: the new
// columns must equal a direct solve (gonum Cholesky of the normal equations)
// for responses that were 0 before they appeared.
func TestRidgeSetColsMidStream(t *testing.T) {
	rng := rand.New(rand.NewPCG(9, 10))
	d, n, lambda := 25, 300, 3.0
	X := ridgeRandRows(rng, n, d, func(int) float64 { return float64(rng.IntN(2)*2 - 1) })
	Y := ridgeRandRows(rng, n, 5, func(int) float64 { return float64(rng.IntN(4)) })
	r, err := NewRidge(d, 2, lambda)
	if err != nil {
		t.Fatal(err)
	}
	for k := range n {
		switch k {
		case 100:
			r.SetCols(3) // two rows are pending here
		case 230:
			r.SetCols(5)
		}
		for c := r.Cols(); c < 5; c++ {
			Y[k][c] = 0 // what the reference sees before the column existed
		}
		r.AddRow(X[k], Y[k][:r.Cols()])
		if k%7 == 5 {
			r.Flush()
		}
	}
	r.Flush()
	coef, icpt, _ := ridgeDirect(t, X, Y, lambda)
	w := make([]float64, d)
	for c := range 5 {
		b := r.WeightsTo(w, c)
		if e := ridgeRelVec(w, coef[c]); e > 1e-9 {
			t.Errorf("column %d: weights off by %.3g relative", c, e)
		}
		if ridgeRel(b, icpt[c]) > 1e-9 {
			t.Errorf("column %d: intercept %v, direct %v", c, b, icpt[c])
		}
	}
	r.SetCols(1)
	if r.Err() == nil || r.Cols() != 5 {
		t.Errorf("shrinking accepted: cols %d, err %v", r.Cols(), r.Err())
	}
}

// TestRidgeLongRunNoDrift folds 20,000 rows of a correlated stimulus in
// blocks of 60 and compares weights, objective and the whole inverse
// (Λ + ÃᵀÃ)⁻¹ with a batch solve (gonum Cholesky) at the end: the recursion
// must not drift (RLS round-off, Haykin, Adaptive Filter Theory, RLS chapter).
func TestRidgeLongRunNoDrift(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 12))
	d, u, n, lambda := 16, 2, 20000, 1.0
	X := make([][]float64, n)
	prev := make([]float64, d)
	for k := range X {
		x := make([]float64, d)
		for i := range x {
			x[i] = 0.8*prev[i] + rng.NormFloat64() + 0.3 // correlated in time, non-zero mean
		}
		X[k], prev = x, x
	}
	Y := ridgeRandRows(rng, n, u, func(c int) float64 { return rng.NormFloat64() })
	for k := range Y {
		Y[k][0] += 2*X[k][3] - X[k][5] + 1
	}
	r, err := NewRidge(d, u, lambda)
	if err != nil {
		t.Fatal(err)
	}
	for k := range n {
		r.AddRow(X[k], Y[k])
		if k%60 == 59 {
			r.Flush()
		}
	}
	r.Flush()
	coef, icpt, inv := ridgeDirect(t, X, Y, lambda)
	w := make([]float64, d)
	for c := range u {
		b := r.WeightsTo(w, c)
		if e := ridgeRelVec(w, coef[c]); e > 1e-9 {
			t.Errorf("column %d: weights off by %.3g relative after %d rows", c, e, n)
		}
		if ridgeRel(b, icpt[c]) > 1e-9 {
			t.Errorf("column %d: intercept %v, batch %v", c, b, icpt[c])
		}
		// Objective against the direct formula RSS + λ‖w‖² with the batch weights.
		var obj float64
		for k := range n {
			e := Y[k][c] - icpt[c]
			for i := range d {
				e -= X[k][i] * coef[c][i]
			}
			obj += e * e
		}
		for _, x := range coef[c] {
			obj += lambda * x * x
		}
		if ridgeRel(r.Objective(c), obj) > 1e-9 {
			t.Errorf("column %d: objective %v, direct %v", c, r.Objective(c), obj)
		}
	}
	// The stored triangle plus the intercept correction is the whole inverse.
	cc, pe := r.interceptCorrection()
	var worst float64
	for i := range d + 1 {
		for j := 0; j <= i; j++ {
			got := r.p[i*r.ld+j] + cc*pe[i]*pe[j]
			worst = math.Max(worst, ridgeRel(got, inv.At(i, j))*math.Abs(inv.At(i, j))/math.Abs(inv.At(i, i)))
		}
	}
	if worst > 1e-9 {
		t.Errorf("inverse drifted: worst relative element error %.3g", worst)
	}
}

// TestRidgeHandWorked checks one row-by-row case by hand: x = −1, 0, 1 and
// y = 1, 2, 3 with λ = 1 give w = Σx̃ỹ/(Σx̃² + λ) = 2/3, b = ȳ − w·x̄ = 2,
// RSS = Σ(ỹ − w x̃)² = 2/9, objective 2/9 + 4/9 = 2/3, and h = 2/3 (worked
// example, common practice, no source).
func TestRidgeHandWorked(t *testing.T) {
	r, err := NewRidge(1, 1, 1)
	if err != nil {
		t.Fatal(err)
	}
	for i, x := range []float64{-1, 0, 1} {
		r.AddRow([]float64{x}, []float64{float64(i + 1)})
		r.Flush()
	}
	w := make([]float64, 1)
	b := r.WeightsTo(w, 0)
	t1, t2 := r.HatTraces()
	t1d, t2d := r.samplingDiagTraces(make([]float64, 1))
	checks := []struct {
		name      string
		got, want float64
	}{
		{"t1 beside the sampling diagonal", t1d, 2.0 / 3},
		{"t2 beside the sampling diagonal", t2d, 4.0 / 9},
		{"w", w[0], 2.0 / 3},
		{"b", b, 2},
		{"objective", r.Objective(0), 2.0 / 3},
		{"t1", t1, 2.0 / 3},
		{"t2", t2, 4.0 / 9},
	}
	for _, c := range checks {
		if math.Abs(c.got-c.want) > 1e-13 {
			t.Errorf("%s = %v, want %v", c.name, c.got, c.want)
		}
	}
	post := make([]float64, 1)
	r.PosteriorDiagTo(post)
	if math.Abs(post[0]-1.0/3) > 1e-13 { // 1/(Σx̃² + λ)
		t.Errorf("posterior diagonal %v, want 1/3", post[0])
	}
}

func TestNewRidgeRefusesBadArguments(t *testing.T) {
	cases := []struct {
		name      string
		dim, cols int
		lambda    float64
	}{
		{"zero dim", 0, 1, 1},
		{"negative cols", 3, -1, 1},
		{"zero lambda", 3, 1, 0},
		{"NaN lambda", 3, 1, math.NaN()},
		{"infinite lambda", 3, 1, math.Inf(1)},
		{"dimension too large", maxRidgeDim + 1, 1, 1},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			r, err := NewRidge(c.dim, c.cols, c.lambda)
			if err == nil || r != nil {
				t.Fatalf("accepted (%v)", r)
			}
			if !strings.HasPrefix(err.Error(), "online: ") {
				t.Errorf("error %q lacks the package prefix", err)
			}
		})
	}
}

func TestRidgeRefusesBadRows(t *testing.T) {
	cases := []struct {
		name string
		x, y []float64
	}{
		{"short x", []float64{1}, []float64{1}},
		{"long y", []float64{1, 2}, []float64{1, 2}},
		{"NaN stimulus", []float64{math.NaN(), 1}, []float64{1}},
		{"infinite response", []float64{1, 1}, []float64{math.Inf(-1)}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			r, _ := NewRidge(2, 1, 1)
			r.AddRow(c.x, c.y)
			if r.Pending() != 0 || r.Rejected() != 1 || !errors.Is(r.Err(), ErrRidgeRow) {
				t.Errorf("pending %d rejected %d err %v", r.Pending(), r.Rejected(), r.Err())
			}
		})
	}
	r, _ := NewRidge(2, 1, 1)
	w := make([]float64, 2)
	if b := r.WeightsTo(w, 1); !math.IsNaN(b) || !math.IsNaN(w[0]) || r.Err() == nil {
		t.Errorf("column out of range: intercept %v, w %v, err %v", b, w, r.Err())
	}
	if o := r.Objective(-1); !math.IsNaN(o) {
		t.Errorf("objective of column -1 is %v", o)
	}
}

func TestRidgeResetAndEmpty(t *testing.T) {
	r, _ := NewRidge(3, 1, 2)
	w := make([]float64, 3)
	post := make([]float64, 3)
	check := func(when string) {
		if b := r.WeightsTo(w, 0); b != 0 || w[0] != 0 || r.Objective(0) != 0 {
			t.Errorf("%s: w %v b %v objective %v, want zeros", when, w, b, r.Objective(0))
		}
		r.PosteriorDiagTo(post)
		if post[0] != 0.5 { // the prior variance 1/λ
			t.Errorf("%s: posterior diagonal %v, want 1/λ = 0.5", when, post[0])
		}
		if t1, t2 := r.HatTraces(); t1 != 0 || t2 != 0 {
			t.Errorf("%s: hat traces %v %v, want 0", when, t1, t2)
		}
	}
	check("new")
	r.AddRow([]float64{1, 2, 3}, []float64{4})
	r.Flush()
	r.AddRow([]float64{1, 0, 3}, []float64{1})
	r.Reset()
	if r.Rows() != 0 || r.Pending() != 0 {
		t.Errorf("after Reset rows %d pending %d", r.Rows(), r.Pending())
	}
	check("reset")
}

func TestRidgeAddRowFlushDoNotAllocate(t *testing.T) {
	rng := rand.New(rand.NewPCG(13, 14))
	d, u := 500, 9
	r, _ := NewRidge(d, u, 10)
	x := make([]float64, d)
	y := make([]float64, u)
	fill := func() {
		for i := range x {
			x[i] = rng.NormFloat64()
		}
		for i := range y {
			y[i] = float64(rng.IntN(3))
		}
	}
	for range 60 { // grow the buffer
		fill()
		r.AddRow(x, y)
	}
	r.Flush()
	allocs := testing.AllocsPerRun(3, func() {
		for range 60 {
			r.AddRow(x, y)
		}
		r.Flush()
	})
	if allocs != 0 {
		t.Errorf("AddRow and Flush allocate %v times per block", allocs)
	}
	if got := testing.AllocsPerRun(3, func() { r.HatTraces() }); got != 0 {
		t.Errorf("HatTraces allocates %v times", got)
	}
}

// ExampleRidge fits y = 1 + 2·x₀ − x₁ from noiseless rows with a small
// penalty, one Flush per block of rows.
func ExampleRidge() {
	r, err := NewRidge(2, 1, 1e-6)
	if err != nil {
		fmt.Println(err)
		return
	}
	for i := range 40 {
		x0, x1 := float64(i%5), float64(i%3)
		r.AddRow([]float64{x0, x1}, []float64{1 + 2*x0 - x1})
		if i%10 == 9 {
			r.Flush()
		}
	}
	w := make([]float64, 2)
	b := r.WeightsTo(w, 0)
	fmt.Printf("rows %d, w = [%.4f %.4f], intercept %.4f\n", r.Rows(), w[0], w[1], b)
	// Output: rows 40, w = [2.0000 -1.0000], intercept 1.0000
}
