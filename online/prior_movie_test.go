package online

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"

	"livefield/replay/synth"
)

// smoothMovie is a correlated stimulus of our own for the simulations: each
// frame is Gaussian white noise blurred by a Gaussian of spatialSigma
// pixels (on a torus, so every pixel is alike), and frames follow an AR(1)
// process in time, s_m = ρ s_{m−1} + √(1−ρ²) u_m, so that every pixel has
// unit variance, neighbouring pixels correlate as exp(−d²/(4σ²)) and
// successive frames as ρ. All frames are drawn up front from the seed.
type smoothMovie struct {
	width, height int
	frames        [][]float64
}

func newSmoothMovie(width, height, frames int, spatialSigma, rho float64, seed uint64) *smoothMovie {
	rng := rand.New(rand.NewPCG(seed, 0x30f1e))
	radius := int(math.Ceil(3 * spatialSigma))
	kernel := make([]float64, 2*radius+1)
	var k2 float64
	for i := range kernel {
		x := float64(i - radius)
		kernel[i] = math.Exp(-x * x / (2 * spatialSigma * spatialSigma))
	}
	// The 2-D kernel is the outer product; its squared sum normalises
	// the blurred white noise to unit variance.
	for _, a := range kernel {
		for _, b := range kernel {
			k2 += a * a * b * b
		}
	}
	norm := 1 / math.Sqrt(k2)
	P := width * height
	m := &smoothMovie{width: width, height: height, frames: make([][]float64, frames)}
	white := make([]float64, P)
	rows := make([]float64, P)
	prev := make([]float64, P)
	for f := range frames {
		for i := range white {
			white[i] = rng.NormFloat64()
		}
		// Blur along rows, then along columns, wrapping at the edges.
		for y := range height {
			for x := range width {
				var s float64
				for i, kv := range kernel {
					s += kv * white[y*width+((x+i-radius)%width+width)%width]
				}
				rows[y*width+x] = s
			}
		}
		cur := make([]float64, P)
		for y := range height {
			for x := range width {
				var s float64
				for i, kv := range kernel {
					s += kv * rows[(((y+i-radius)%height+height)%height)*width+x]
				}
				u := s * norm
				if f == 0 {
					cur[y*width+x] = u
				} else {
					cur[y*width+x] = rho*prev[y*width+x] + math.Sqrt(1-rho*rho)*u
				}
			}
		}
		m.frames[f] = cur
		prev = cur
	}
	return m
}

func (m *smoothMovie) Width() int             { return m.width }
func (m *smoothMovie) Height() int            { return m.height }
func (m *smoothMovie) Frames() int64          { return int64(len(m.frames)) }
func (m *smoothMovie) White() bool            { return false }
func (m *smoothMovie) PixelVariance() float64 { return 0 }
func (m *smoothMovie) FrameTo(dst []float64, f int64) error {
	if f < 0 || f >= int64(len(m.frames)) || len(dst) != m.width*m.height {
		return fmt.Errorf("smoothMovie: frame %d of %d into %d values", f, len(m.frames), len(dst))
	}
	copy(dst, m.frames[f])
	return nil
}

// normaliseResponses scales every simulated unit's filter so that its
// response wᵀx has unit standard deviation over the movie's first bins, as
// the rig's cells have on white noise (their rates then average the
// scenario's rate; on a correlated movie a unit-norm filter's response
// varies by wᵀΣw, which would make the exponential's rates run away).
func (b *simBlock) normaliseResponses(bins int) {
	P := b.width * b.height
	d, n := P*b.lags, len(b.model)
	frames := make([][]float64, bins)
	for k := range frames {
		frames[k] = make([]float64, P)
		if err := b.src.FrameTo(frames[k], b.offset+int64(k)); err != nil {
			b.t.Fatal(err)
		}
	}
	for j := range n {
		var s, ss float64
		for k := b.lags - 1; k < bins; k++ {
			var r float64
			for lag := range b.lags {
				for p, v := range frames[k-lag] {
					r += b.w[(lag*P+p)*n+j] * v
				}
			}
			s += r
			ss += r * r
		}
		m := float64(bins - b.lags + 1)
		sd := math.Sqrt(ss/m - (s/m)*(s/m))
		for i := range d {
			b.w[i*n+j] /= sd
		}
	}
}

// ridgeNow solves the ridge the mapper keeps (penalty DefaultLambda, free
// intercept) for every simulated unit from the block's statistics; column
// j is simulated unit j.
func (b *simBlock) ridgeNow() *mat.Dense {
	n, d := len(b.model), len(b.sumX)
	w, _, err := BatchRidge(b.lg, mat.NewDense(n, d, b.sumYX).T(), b.sumY, DefaultLambda)
	if err != nil {
		b.t.Fatal(err)
	}
	return w
}

// TestPriorMovieEfficiency checks the smooth-local prior's data efficiency
// on a correlated movie (smoothMovie: spatial σ 0.7 pixel, frame-to-frame
// correlation 0.7, 12×12 pixels at 60 Hz, 8 lags), with the synthetic
// rig's simple, centre-surround and direction-selective cells as
// exponential LNP models (16 Hz, gain 1.5, each filter's response scaled
// to unit variance on the movie): the spikes the prior needs to reach a
// correlation of 0.8 with the true filter are at most a third of those the
// ridge needs (median over the units). On correlated stimuli the ridge's
// estimate is biased towards the stimulus's principal directions and
// slow to converge, which a prior for smooth, local fields overcomes
// (Sahani & Linden 2003, NIPS 15, their fig. 3 on natural-like stimuli;
// Park & Pillow 2011, PLoS Comput Biol 7(10): e1002219, the claim of
// data efficiency on correlated stimuli).
//
// The fitter is seeded with the ridge, as the mapper does (prior_live.go),
// and refitted warm at each checkpoint. On a more strongly correlated
// movie (σ 1 pixel, correlation 0.8) the prior needs more spikes (median
// ratio bound 0.51 at four minutes with the STA as the seed, and some
// windows misplaced by the noisier ridge): the claim is shown here for a
// moderately correlated movie only.
//
// The ratio is bounded from above: the prior's spikes at the first
// checkpoint where it reached 0.8, over the ridge's at the last checkpoint
// where it was still below (or at the block's end, if it never reached
// 0.8, which makes the true ratio only smaller).
func TestPriorMovieEfficiency(t *testing.T) {
	const (
		side, lags = 12, 8
		seconds    = 240
	)
	checkpoints := []float64{10, 15, 20, 30, 45, 60, 90, 120, 180, 240}
	if raceEnabled {
		t.Skip("a four-minute simulation with ridge solves at ten checkpoints; run it without -race")
	}
	movie := newSmoothMovie(side, side, seconds*60, 0.7, 0.7, 11)
	b := newSimBlockOn(t, synth.Scenario{Seed: 11, Width: side, Height: side, Lags: lags, MeanRate: 16, Gain: 1.5}, movie)
	b.normaliseResponses(3000)
	units := b.linearUnits()
	fitter, err := NewPriorFitter(side, side, lags, simOptions)
	if err != nil {
		t.Fatal(err)
	}
	type first struct{ prior, ridge, ridgeBelow float64 } // spikes
	firsts := make([]first, len(units))
	for _, sec := range checkpoints {
		b.run(int64(sec * 60))
		view, err := b.lg.View()
		if err != nil {
			t.Fatal(err)
		}
		ridge := b.ridgeNow()
		for i, u := range units {
			j := b.unit(u)
			st := b.stats(view, u)
			st.Seed = mat.Col(nil, j, ridge) // as the mapper places the window
			fit, err := fitter.Refit(u, st)
			if err != nil {
				t.Fatal(err)
			}
			rp, rr := priorCorr(fit.Weights, b.truth[u].Filter), priorCorr(st.Seed, b.truth[u].Filter)
			spikes := b.spikes(u)
			f := &firsts[i]
			if f.prior == 0 && rp >= 0.8 {
				f.prior = spikes
			}
			if f.ridge == 0 {
				if rr >= 0.8 {
					f.ridge = spikes
				} else {
					f.ridgeBelow = spikes
				}
			}
			t.Logf("%3.0f s unit %2d (%s): %6.0f spikes, r prior %.3f, ridge %.3f", sec, u, b.truth[u].Kind, spikes, rp, rr)
		}
	}
	logShareError(t, b, movie, fitter.units[units[0]].win)
	var ratios []float64
	for i, u := range units {
		f := firsts[i]
		ratio := math.Inf(1)
		if f.prior > 0 && f.ridgeBelow > 0 {
			ratio = f.prior / f.ridgeBelow
		}
		ratios = append(ratios, ratio)
		t.Logf("unit %2d (%s): prior r ≥ 0.8 at %.0f spikes, ridge at %.0f (0: not within %d s), below at %.0f; ratio ≤ %.3f",
			u, b.truth[u].Kind, f.prior, f.ridge, seconds, f.ridgeBelow, ratio)
	}
	if m := medianOf(ratios); !(m <= 1.0/3) {
		t.Errorf("median over units of the prior's spikes to r ≥ 0.8 over the ridge's: ≤ %.3f, want ≤ 1/3", m)
	} else {
		t.Logf("median ratio of spikes to r ≥ 0.8, prior over ridge: ≤ %.3f", m)
	}
}

// logShareError logs how far the whole block's window Gram matrix scaled
// by half A's share of the bins (GramView.Share, which the live prior's
// half fits use) is from half A's own centred window Gram matrix, built
// from the frames of half A's chunks (the mapper's alternating 5 s chunks)
// by denseWindowGram: the relative Frobenius error of the approximation.
// Measured: 9.9 % on the movie of TestPriorMovieEfficiency, 14.1 % on white
// Gaussian noise of the same size and length (smoothMovie with σ 0.01 and
// correlation 0), so on this movie the approximation is no worse than on
// the white noise it was made for; most of it is the half's own sampling
// fluctuation.
func logShareError(t *testing.T, b *simBlock, movie *smoothMovie, w PriorWindow) {
	t.Helper()
	idx := w.Indices(b.width, b.height)
	chunk := int(math.Round(5 / b.dt)) // bins per chunk
	var segments [][][]float64
	for first := 0; first < b.used; first += 2 * chunk {
		last := min(first+chunk, b.used) - 1 // used bins first…last
		segments = append(segments, movie.frames[first:last+b.lags])
	}
	half, _, binsA := denseWindowGram(segments, b.lags, idx)
	view, err := b.lg.View()
	if err != nil {
		t.Fatal(err)
	}
	k := len(idx)
	whole := make([]float64, k*k)
	if err := view.Share(binsA).WindowTo(whole, idx); err != nil {
		t.Fatal(err)
	}
	var num, den float64
	for i := range whole {
		num += (whole[i] - half[i]) * (whole[i] - half[i])
		den += half[i] * half[i]
	}
	t.Logf("half A (%d of %d bins): its window Gram matrix and the whole block's scaled to its share differ by %.1f %% (Frobenius)",
		binsA, b.used, 100*math.Sqrt(num/den))
}
