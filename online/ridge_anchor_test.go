package online

import (
	"fmt"
	"math"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// ridgeStats are the sufficient statistics of the first n rows, as Anchor
// takes them.
func ridgeStats(X, Y [][]float64, n int) (gram func(*mat.SymDense) error, sumX, cross, yy []float64) {
	d, cols := len(X[0]), len(Y[0])
	g := mat.NewSymDense(d, nil)
	sumX = make([]float64, d)
	cross = make([]float64, cols*(d+1))
	yy = make([]float64, cols)
	for k := range n {
		for i, xi := range X[k] {
			sumX[i] += xi
			for j := i; j < d; j++ {
				g.SetSym(i, j, g.At(i, j)+xi*X[k][j])
			}
			for c, y := range Y[k] {
				cross[c*(d+1)+i] += y * xi
			}
		}
		for c, y := range Y[k] {
			cross[c*(d+1)+d] += y
			yy[c] += y * y
		}
	}
	gram = func(dst *mat.SymDense) error {
		for i := range d {
			for j := i; j < d; j++ {
				dst.SetSym(i, j, g.At(i, j))
			}
		}
		return nil
	}
	return gram, sumX, cross, yy
}

// ridgeStateOff is the largest relative difference between two ridges'
// states: P (the lower triangle it reads), the weights and the objectives.
func ridgeStateOff(a, b *Ridge) (p, w, obj float64) {
	n, ld := a.n, a.ld
	var num, den float64
	for i := range n {
		for j := 0; j <= i; j++ {
			d := a.p[i*ld+j] - b.p[i*ld+j]
			num += d * d
			den += b.p[i*ld+j] * b.p[i*ld+j]
		}
	}
	p = math.Sqrt(num / max(den, 1e-300))
	for c := range a.cols {
		w = max(w, ridgeRelVec(a.wt[c*ld:c*ld+n], b.wt[c*ld:c*ld+n]))
		obj = max(obj, ridgeRel(a.obj[c], b.obj[c]))
	}
	return p, w, obj
}

// TestRidgeAnchorAgainstScikitLearn re-anchors the ridge from the
// sufficient statistics at every other checkpoint and carries on by the
// block recursion in between: at every checkpoint weights, intercept,
// objective and posterior diagonal must match scikit-learn's Ridge and
// numpy (testdata/golden/ridge_golden.py) to 1e-8 relative, and the whole
// state (P, W, J) must match a ridge fed the same rows by the recursion only,
// for the white and the correlated stimulus.
func TestRidgeAnchorAgainstScikitLearn(t *testing.T) {
	g := loadRidgeGolden(t)
	for _, c := range g.Cases {
		t.Run(fmt.Sprintf("%s/lambda=%g", c.Stimulus, c.Lambda), func(t *testing.T) {
			st := g.Stimuli[c.Stimulus]
			X := ridgeLagRows(st.Frames, g.Lags)
			Y := st.Y
			dim, cols := len(X[0]), len(Y[0])
			r, err := NewRidge(dim, cols, c.Lambda)
			if err != nil {
				t.Fatal(err)
			}
			pure, _ := NewRidge(dim, cols, c.Lambda)
			row := 0
			for i, cp := range c.Checkpoints {
				for ; row < cp.N; row++ {
					pure.AddRow(X[row], Y[row])
					if i%2 == 1 {
						r.AddRow(X[row], Y[row])
					}
				}
				pure.Flush()
				if i%2 == 0 {
					gram, sumX, cross, yy := ridgeStats(X, Y, cp.N)
					if err := r.Anchor(int64(cp.N), gram, sumX, cross, yy); err != nil {
						t.Fatal(err)
					}
				} else {
					r.Flush() // the recursion on top of the anchor
				}
				if r.Rows() != int64(cp.N) || r.Pending() != 0 {
					t.Fatalf("rows %d pending %d, want %d and 0", r.Rows(), r.Pending(), cp.N)
				}
				if p, wo, obj := ridgeStateOff(r, pure); p > 1e-8 || wo > 1e-8 || obj > 1e-8 {
					t.Errorf("n=%d: state off the recursion's by %.3g (P), %.3g (W), %.3g (J)", cp.N, p, wo, obj)
				}
				checkRidgeCheckpoint(t, r, &cp)
			}
			if r.Err() != nil {
				t.Error(r.Err())
			}
		})
	}
}

// TestRidgeAnchorEmptyColumns re-anchors a ridge that has room for more
// columns than the responses fill (as the mapper keeps for units yet to
// come): Anchor skips the trailing columns whose cross-products are zero.
// The columns in use must still match scikit-learn's Ridge and numpy
// (testdata/golden/ridge_golden.py, 1e-8 relative), the spare ones must
// hold W = 0 and J = yᵀy = 0, and when a spare column gets responses after
// the anchor (a unit appearing late) the state must match a ridge fed every
// row by the recursion only.
func TestRidgeAnchorEmptyColumns(t *testing.T) {
	g := loadRidgeGolden(t)
	const spare = 3
	for _, c := range g.Cases {
		t.Run(fmt.Sprintf("%s/lambda=%g", c.Stimulus, c.Lambda), func(t *testing.T) {
			st := g.Stimuli[c.Stimulus]
			X := ridgeLagRows(st.Frames, g.Lags)
			first := c.Checkpoints[0].N
			// Y with spare columns: zero up to the first checkpoint, then a
			// copy of column 0 in the first spare (a late unit).
			Y := make([][]float64, len(st.Y))
			for k, row := range st.Y {
				Y[k] = append(append([]float64(nil), row...), make([]float64, spare)...)
				if k >= first {
					Y[k][len(row)] = row[0]
				}
			}
			dim, cols := len(X[0]), len(st.Y[0])
			r, err := NewRidge(dim, cols+spare, c.Lambda)
			if err != nil {
				t.Fatal(err)
			}
			pure, _ := NewRidge(dim, cols+spare, c.Lambda)
			for k := range first {
				pure.AddRow(X[k], Y[k])
			}
			pure.Flush()
			gram, sumX, cross, yy := ridgeStats(X, Y, first)
			if err := r.Anchor(int64(first), gram, sumX, cross, yy); err != nil {
				t.Fatal(err)
			}
			cp := c.Checkpoints[0]
			w := make([]float64, dim)
			for u := range cols {
				b := r.WeightsTo(w, u)
				if e := max(ridgeRelVec(w, cp.Coef[u]), ridgeRel(b, cp.Intercept[u]), ridgeRel(r.Objective(u), cp.Objective[u])); e > 1e-8 {
					t.Errorf("column %d: off scikit-learn's by %.3g relative", u, e)
				}
			}
			for u := cols; u < cols+spare; u++ {
				b := r.WeightsTo(w, u)
				if !allZero(w) || b != 0 || r.Objective(u) != 0 {
					t.Errorf("spare column %d: weights not zero (intercept %v, objective %v)", u, b, r.Objective(u))
				}
			}
			if p, wo, obj := ridgeStateOff(r, pure); p > 1e-8 || wo > 1e-8 || obj > 1e-8 {
				t.Errorf("at the anchor: state off the recursion's by %.3g (P), %.3g (W), %.3g (J)", p, wo, obj)
			}
			for k := first; k < len(X); k++ {
				r.AddRow(X[k], Y[k])
				pure.AddRow(X[k], Y[k])
			}
			r.Flush()
			pure.Flush()
			if p, wo, obj := ridgeStateOff(r, pure); p > 1e-8 || wo > 1e-8 || obj > 1e-8 {
				t.Errorf("after the late column: state off the recursion's by %.3g (P), %.3g (W), %.3g (J)", p, wo, obj)
			}
		})
	}
}
