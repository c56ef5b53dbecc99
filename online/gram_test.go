package online

import (
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"testing"
	"time"

	"gonum.org/v1/gonum/mat"
)

// laggedDesign builds the lagged design row by row (k = L−1…n−1), the plain
// definition that LagGram must reproduce.
func laggedDesign(frames [][]float64, lags int) *mat.Dense {
	p := len(frames[0])
	rows := len(frames) - lags + 1
	x := mat.NewDense(rows, p*lags, nil)
	for k := lags - 1; k < len(frames); k++ {
		for i := range lags {
			for j, v := range frames[k-i] {
				x.Set(k-lags+1, i*p+j, v)
			}
		}
	}
	return x
}

func relDiff(a, b mat.Matrix) float64 {
	var d mat.Dense
	d.Sub(a, b)
	return mat.Norm(&d, math.Inf(1)) / math.Max(mat.Norm(b, math.Inf(1)), 1e-300)
}

// feedLagGram adds frames of value(m, i) (frame m, pixel i) to a new
// LagGram and returns it with the frames.
func feedLagGram(t *testing.T, pixels, lags, n int, value func(m, i int) float64) (*LagGram, [][]float64) {
	t.Helper()
	g, err := NewLagGram(pixels, lags)
	if err != nil {
		t.Fatal(err)
	}
	frames := make([][]float64, n)
	for m := range frames {
		frames[m] = make([]float64, pixels)
		for i := range frames[m] {
			frames[m][i] = value(m, i)
		}
		if err := g.AddFrame(frames[m]); err != nil {
			t.Fatal(err)
		}
	}
	return g, frames
}

func TestLagGramMatchesDesign(t *testing.T) {
	// Each case exercises one route: two-level frames (packed bits, over more
	// than one 1024-frame chunk), general frames (chunked products), and a
	// stimulus that turns from two-level into general half way.
	type gen func(r *rand.Rand, m int) float64
	pm := func(r *rand.Rand, m int) float64 { return float64(2*r.IntN(2) - 1) }
	cases := []struct {
		name         string
		pixels, lags int
		frames       int
		value        gen
	}{
		{"pm1 n=L", 4, 5, 5, pm},
		{"pm1 short", 3, 4, 40, pm},
		{"pm1 two chunks", 4, 5, 2100, pm},
		{"zero-one", 5, 3, 1500, func(r *rand.Rand, m int) float64 { return float64(r.IntN(2)) }},
		{"contrast 0.3", 3, 6, 700, func(r *rand.Rand, m int) float64 { return 0.5 + 0.3*float64(2*r.IntN(2)-1) }},
		{"constant", 3, 3, 50, func(r *rand.Rand, m int) float64 { return 0.25 }},
		{"gaussian", 4, 5, 700, func(r *rand.Rand, m int) float64 { return r.NormFloat64() }},
		{"gaussian lag 1", 6, 1, 300, func(r *rand.Rand, m int) float64 { return r.NormFloat64() }},
		{"binary then gaussian", 4, 6, 1800, func(r *rand.Rand, m int) float64 {
			if m < 1300 {
				return pm(r, m)
			}
			return r.NormFloat64()
		}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			r := rand.New(rand.NewPCG(1, uint64(c.frames)))
			g, frames := feedLagGram(t, c.pixels, c.lags, c.frames, func(m, _ int) float64 { return c.value(r, m) })
			x := laggedDesign(frames, c.lags)
			var want mat.SymDense
			want.SymOuterK(1, x.T())
			var got mat.SymDense
			if err := g.GramTo(&got, false); err != nil {
				t.Fatal(err)
			}
			if e := relDiff(&got, &want); e > 1e-10 {
				t.Errorf("XᵀX: relative difference %.3g > 1e-10", e)
			}
			// Centred: X̃ = X − 1x̄ᵀ.
			rows, cols := x.Dims()
			mean := make([]float64, cols)
			for j := range cols {
				mean[j] = mat.Sum(x.ColView(j)) / float64(rows)
			}
			xc := mat.DenseCopyOf(x)
			for i := range rows {
				for j := range cols {
					xc.Set(i, j, xc.At(i, j)-mean[j])
				}
			}
			want.SymOuterK(1, xc.T())
			if err := g.GramTo(&got, true); err != nil {
				t.Fatal(err)
			}
			scale := mat.Norm(&want, math.Inf(1))
			var d mat.Dense
			d.Sub(&got, &want)
			if scale == 0 {
				scale = 1 // constant frames: the centred Gram is zero
			}
			if e := mat.Norm(&d, math.Inf(1)) / scale; e > 1e-10 {
				t.Errorf("X̃ᵀX̃: relative difference %.3g > 1e-10", e)
			}
			gotMean := make([]float64, cols)
			if err := g.MeanTo(gotMean); err != nil {
				t.Fatal(err)
			}
			for j := range cols {
				if math.Abs(gotMean[j]-mean[j]) > 1e-12*math.Max(1, math.Abs(mean[j])) {
					t.Fatalf("mean[%d] = %v, want %v", j, gotMean[j], mean[j])
				}
			}
		})
	}
}

func TestLagGramReset(t *testing.T) {
	// After a block that left the two-level route, Reset must give the same
	// Gram as a fresh accumulator.
	r := rand.New(rand.NewPCG(2, 2))
	used, _ := NewLagGram(3, 4)
	for range 300 {
		used.AddFrame([]float64{r.NormFloat64(), r.NormFloat64(), r.NormFloat64()})
	}
	used.Reset()
	fresh, _ := NewLagGram(3, 4)
	for range 1500 {
		f := []float64{float64(r.IntN(2)), float64(r.IntN(2)), float64(r.IntN(2))}
		used.AddFrame(f)
		fresh.AddFrame(f)
	}
	var a, b mat.SymDense
	if err := used.GramTo(&a, true); err != nil {
		t.Fatal(err)
	}
	fresh.GramTo(&b, true)
	if !mat.Equal(&a, &b) {
		t.Errorf("Gram after Reset differs from a fresh one by %.3g", relDiff(&a, &b))
	}
}

func TestLagGramErrors(t *testing.T) {
	if _, err := NewLagGram(0, 3); err == nil {
		t.Error("NewLagGram(0, 3): no error")
	}
	if _, err := NewLagGram(4, 0); err == nil {
		t.Error("NewLagGram(4, 0): no error")
	}
	g, _ := NewLagGram(2, 3)
	if err := g.AddFrame([]float64{1}); err == nil {
		t.Error("short frame: no error")
	}
	if err := g.AddFrame([]float64{1, math.NaN()}); err == nil {
		t.Error("NaN: no error")
	}
	if g.Frames() != 0 {
		t.Errorf("rejected frames were counted: %d", g.Frames())
	}
	g.AddFrame([]float64{1, 2})
	var s mat.SymDense
	if err := g.GramTo(&s, false); err != ErrFewFrames {
		t.Errorf("GramTo with 1 frame of 3 lags: err %v, want ErrFewFrames", err)
	}
	g.AddFrame([]float64{1, 2})
	g.AddFrame([]float64{1, 2})
	wrong := mat.NewSymDense(5, nil)
	if err := g.GramTo(wrong, false); err == nil {
		t.Error("wrong-size destination: no error")
	}
	if _, _, err := BatchRidge(g, mat.NewDense(6, 1, nil), []float64{0}, 0); err == nil {
		t.Error("lambda 0: no error")
	}
	if _, _, err := BatchRidge(g, mat.NewDense(5, 1, nil), []float64{0}, 1); err == nil {
		t.Error("cross of the wrong size: no error")
	}
}

type ridgeCase struct {
	Name      string      `json:"name"`
	Pixels    int         `json:"pixels"`
	Lags      int         `json:"lags"`
	Lambda    float64     `json:"lambda"`
	Frames    [][]float64 `json:"frames"`
	Y         [][]float64 `json:"y"`
	Coef      [][]float64 `json:"coef"`
	Intercept []float64   `json:"intercept"`
}

func TestBatchRidgeGolden(t *testing.T) {
	// Reference: scikit-learn Ridge(alpha=λ, fit_intercept=True), computed by
	// testdata/golden/gram_golden.py into gram_golden.json.
	raw, err := os.ReadFile("../testdata/golden/gram_golden.json")
	if err != nil {
		t.Fatal(err)
	}
	var golden struct {
		Cases []ridgeCase `json:"cases"`
	}
	if err := json.Unmarshal(raw, &golden); err != nil {
		t.Fatal(err)
	}
	for _, c := range golden.Cases {
		t.Run(c.Name, func(t *testing.T) {
			g, err := NewLagGram(c.Pixels, c.Lags)
			if err != nil {
				t.Fatal(err)
			}
			for _, f := range c.Frames {
				if err := g.AddFrame(f); err != nil {
					t.Fatal(err)
				}
			}
			x := laggedDesign(c.Frames, c.Lags)
			units := len(c.Intercept)
			y := mat.NewDense(len(c.Y), units, nil)
			for k, row := range c.Y {
				y.SetRow(k, row)
			}
			var cross mat.Dense
			cross.Mul(x.T(), y)
			ySum := make([]float64, units)
			for u := range units {
				ySum[u] = mat.Sum(y.ColView(u))
			}
			w, b, err := BatchRidge(g, &cross, ySum, c.Lambda)
			if err != nil {
				t.Fatal(err)
			}
			for u := range units {
				for j, want := range c.Coef[u] {
					if got := w.At(j, u); math.Abs(got-want) > 1e-9*math.Max(1, math.Abs(want)) {
						t.Errorf("unit %d coef %d = %.12g, scikit-learn %.12g", u, j, got, want)
					}
				}
				if math.Abs(b[u]-c.Intercept[u]) > 1e-9*math.Max(1, math.Abs(c.Intercept[u])) {
					t.Errorf("unit %d intercept = %.12g, scikit-learn %.12g", u, b[u], c.Intercept[u])
				}
			}
		})
	}
}

// TestLagGramPairCounts checks the two-level route's pair counts, full
// chunks and the partial one, against their definition counted frame by
// frame: Q_τ(n)[p, q] = Σ_{τ≤m<n} s_m[p]·s_{m−τ}[q]. With 0/1 frames every
// term is an integer, so the two must agree exactly (the definition is
// LagGram's own doc comment; the sizes run the vector counting paths, 8 and
// 16 strings at a time, and the scalar tail).
func TestLagGramPairCounts(t *testing.T) {
	cases := []struct{ pixels, lags, frames int }{
		{20, 5, 2500},  // D = 100: vector paths and a tail of 4
		{16, 12, 1100}, // D = 192, one full chunk and a short one
		{3, 2, 700},    // D = 6: the scalar tail only, a partial chunk only
	}
	for _, c := range cases {
		t.Run(fmt.Sprintf("P%d_L%d_n%d", c.pixels, c.lags, c.frames), func(t *testing.T) {
			r := rand.New(rand.NewPCG(5, uint64(c.frames)))
			g, frames := feedLagGram(t, c.pixels, c.lags, c.frames, func(m, i int) float64 {
				if m == 0 && i < 2 {
					return float64(i) // two levels from the first frame on
				}
				return float64(r.IntN(2))
			})
			P, d := c.pixels, c.pixels*c.lags
			got := make([]float64, P*d)
			g.crossTo(got)
			for tau := range c.lags {
				for p := range P {
					for q := range P {
						var want float64
						for m := tau; m < c.frames; m++ {
							want += frames[m][p] * frames[m-tau][q]
						}
						if v := got[p*d+tau*P+q]; v != want {
							t.Fatalf("Q_%d[%d, %d] = %v, want %v", tau, p, q, v, want)
						}
					}
				}
			}
		})
	}
}

// BenchmarkLagGram times AddFrame over a block of binary (or Gaussian) noise
// followed by the centred Gram and the all-units ridge solve. The
// cross-products Σ y x are formed outside the timer (the STA accumulator
// keeps them already).
// The reference size (16×16 pixels at 60 Hz for 30 min, 12 lags, 384 units)
// runs with: go test ./online/ -run '^$' -bench 'LagGram/ref' -benchtime 1x
func BenchmarkLagGram(b *testing.B) {
	sizes := []struct {
		name                      string
		side, lags, frames, units int
		binary                    bool // two-level frames; else Gaussian (the general route)
	}{
		{"8x8_L6_n6000_u32", 8, 6, 6000, 32, true},
		{"16x16_L12_n12000_u64", 16, 12, 12000, 64, true},
		{"gaussian_16x16_L12_n12000_u64", 16, 12, 12000, 64, false},
		{"ref_16x16_L12_n108000_u384", 16, 12, 108000, 384, true},
	}
	for _, s := range sizes {
		b.Run(s.name, func(b *testing.B) {
			p := s.side * s.side
			r := rand.New(rand.NewPCG(3, 4))
			frames := make([][]float64, s.frames)
			for m := range frames {
				frames[m] = make([]float64, p)
				for i := range frames[m] {
					if s.binary {
						frames[m][i] = float64(2*r.IntN(2) - 1)
					} else {
						frames[m][i] = r.NormFloat64()
					}
				}
			}
			// The solve's cost does not depend on the values of Σ y x, so
			// the benchmark draws them at the scale of 10 spikes/s in
			// 60 Hz bins instead of forming them from spike trains.
			d := p * s.lags
			spikes := float64(s.frames) / 6
			cross := mat.NewDense(d, s.units, nil)
			cd := cross.RawMatrix().Data
			for i := range cd {
				cd[i] = math.Sqrt(spikes) * r.NormFloat64()
			}
			ySum := make([]float64, s.units)
			for u := range ySum {
				ySum[u] = spikes
			}
			g, _ := NewLagGram(p, s.lags)
			b.ReportAllocs()
			b.ResetTimer()
			var add time.Duration
			for b.Loop() {
				g.Reset()
				start := time.Now()
				for _, f := range frames {
					if err := g.AddFrame(f); err != nil {
						b.Fatal(err)
					}
				}
				add += time.Since(start)
				if _, _, err := BatchRidge(g, cross, ySum, 100); err != nil {
					b.Fatal(err)
				}
			}
			b.ReportMetric(b.Elapsed().Seconds()/float64(b.N), "s/block")
			b.ReportMetric(add.Seconds()/float64(b.N), "s-addframe/block")
		})
	}
}

func ExampleBatchRidge() {
	// A unit that responds to pixel 1 one frame late, on a two-pixel stimulus.
	g, _ := NewLagGram(2, 2)
	r := rand.New(rand.NewPCG(7, 7))
	var frames [][]float64
	for range 2000 {
		f := []float64{float64(2*r.IntN(2) - 1), float64(2*r.IntN(2) - 1)}
		frames = append(frames, f)
		g.AddFrame(f)
	}
	cross := mat.NewDense(4, 1, nil)
	var ySum float64
	for k := 1; k < len(frames); k++ {
		y := 3 + 2*frames[k-1][1] // lag 1, pixel 1
		ySum += y
		for i := range 2 {
			for j, v := range frames[k-i] {
				cross.Set(i*2+j, 0, cross.At(i*2+j, 0)+y*v)
			}
		}
	}
	w, b, _ := BatchRidge(g, cross, []float64{ySum}, 1e-6)
	round := func(v float64) float64 { return math.Round(v*1000)/1000 + 0 } // +0 turns −0 into 0
	fmt.Printf("weights %.3f %.3f %.3f %.3f, intercept %.3f\n", round(w.At(0, 0)), round(w.At(1, 0)), round(w.At(2, 0)), round(w.At(3, 0)), round(b[0]))
	// Output: weights 0.000 0.000 0.000 2.000, intercept 3.000
}

// TestLagGramCountsBesideFrames: a full chunk's pair counts run on their
// own goroutine while the next frames come in. Reads (GramTo, View), a
// Restart and the switch to the general route each come right after a
// chunk filled, while its count is under way; the Gram must still be that
// of the lagged design (the plain definition, laggedDesign, summed over the
// segments of a restarted history, after a Reset those that follow it):
// exactly for ±1 frames, whose products
// and sums are integers, and to 1e-10 relative after Gaussian frames. Run
// with -race too.
func TestLagGramCountsBesideFrames(t *testing.T) {
	const pixels, lags, n = 8, 4, 4*1024 + 100
	for _, c := range []struct {
		gaussianFrom int
		reset        bool // a Reset instead of the first read
	}{{n, false}, {3 * 1024, false}, {n, true}} {
		gaussianFrom := c.gaussianFrom
		t.Run(fmt.Sprintf("gaussian from %d, reset %v", gaussianFrom, c.reset), func(t *testing.T) {
			r := rand.New(rand.NewPCG(13, uint64(gaussianFrom)))
			g, err := NewLagGram(pixels, lags)
			if err != nil {
				t.Fatal(err)
			}
			frames := make([][]float64, n)
			var segments [][][]float64
			start := 0
			var got mat.SymDense
			for m := range frames {
				frames[m] = make([]float64, pixels)
				for i := range frames[m] {
					if m < gaussianFrom {
						frames[m][i] = float64(2*r.IntN(2) - 1)
					} else {
						frames[m][i] = r.NormFloat64()
					}
				}
				if err := g.AddFrame(frames[m]); err != nil {
					t.Fatal(err)
				}
				switch m + 1 { // a chunk has just filled: its count is under way
				case 1024:
					if c.reset {
						g.Reset()
						start = m + 1
						break
					}
					if err := g.GramTo(&got, false); err != nil {
						t.Fatal(err)
					}
				case 2048:
					g.Restart()
					segments = append(segments, frames[start:m+1])
					start = m + 1
				case 4096:
					if _, err := g.View(); err != nil {
						t.Fatal(err)
					}
				}
			}
			segments = append(segments, frames[start:])
			want := mat.NewSymDense(pixels*lags, nil)
			for _, seg := range segments {
				x := laggedDesign(seg, lags)
				var part mat.SymDense
				part.SymOuterK(1, x.T())
				want.AddSym(want, &part)
			}
			if err := g.GramTo(&got, false); err != nil {
				t.Fatal(err)
			}
			if gaussianFrom == n && !mat.Equal(&got, want) {
				t.Fatalf("XᵀX differs from the design's (relative %.3g), want equal", relDiff(&got, want))
			}
			if e := relDiff(&got, want); e > 1e-10 {
				t.Fatalf("XᵀX: relative difference %.3g > 1e-10", e)
			}
		})
	}
}
