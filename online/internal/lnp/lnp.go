// Package lnp simulates what the estimators in online are tested against:
// stimuli (binary white noise and a smoothed, temporally correlated movie),
// spike trains independent of the stimulus (Poisson, bursting, refractory,
// slowly modulated) and linear–nonlinear–Poisson (LNP) units of known
// filter. It is the one sampler the package's tests use; everything is
// seeded and deterministic.
package lnp

import (
	"math"
	"math/rand/v2"
)

// Poisson draws a Poisson count of mean mu (mu ≥ 0) by Knuth's product
// method on pieces of mean at most 16 (a sum of independent Poisson counts
// is Poisson with the summed mean), exact for any mu.
func Poisson(rng *rand.Rand, mu float64) float64 {
	var n float64
	for mu > 0 {
		m := math.Min(mu, 16)
		mu -= m
		l, p := math.Exp(-m), 1.0
		for {
			p *= rng.Float64()
			if p <= l {
				break
			}
			n++
		}
	}
	return n
}

// Stimulus produces frames one bin at a time.
type Stimulus interface {
	Next(frame []float64) // writes the next frame (width×height, row-major)
	Variance() float64    // per-pixel variance
}

// White is binary noise: every pixel of every frame is ±C independently.
type White struct {
	C   float64
	Rng *rand.Rand
}

// Next writes a fresh frame of ±C pixels.
func (w *White) Next(frame []float64) {
	for i := range frame {
		frame[i] = w.C * float64(2*w.Rng.IntN(2)-1)
	}
}

// Variance is C².
func (w *White) Variance() float64 { return w.C * w.C }

// Movie is a correlated Gaussian movie: each frame is the previous one
// times A plus fresh noise (an AR(1) process per pixel, Γ(τ) ∝ A^|τ|), and
// the fresh noise is a 3×3 box average of white noise (neighbouring pixels
// correlated, wrapping at the edges). Pixels have unit variance.
type Movie struct {
	W, H int
	A    float64
	Rng  *rand.Rand

	state, raw []float64
}

// Next advances the movie by one frame.
func (m *Movie) Next(frame []float64) {
	n := m.W * m.H
	if m.state == nil {
		m.state, m.raw = make([]float64, n), make([]float64, n)
		m.step(1) // start in the stationary distribution
	}
	m.step(math.Sqrt(1 - m.A*m.A))
	copy(frame, m.state)
}

func (m *Movie) step(innovation float64) {
	for i := range m.raw {
		m.raw[i] = m.Rng.NormFloat64()
	}
	a := m.A
	if innovation == 1 {
		a = 0
	}
	for y := 0; y < m.H; y++ {
		for x := 0; x < m.W; x++ {
			var v float64
			for dy := -1; dy <= 1; dy++ {
				for dx := -1; dx <= 1; dx++ {
					v += m.raw[((y+dy+m.H)%m.H)*m.W+(x+dx+m.W)%m.W]
				}
			}
			i := y*m.W + x
			m.state[i] = a*m.state[i] + innovation*v/3 // 9 terms: sd 3
		}
	}
}

// Variance is 1 (for frames of at least 3×3 pixels, where the box holds 9
// distinct pixels).
func (m *Movie) Variance() float64 { return 1 }

// Train is a spike train independent of the stimulus: Next returns the
// count of the next bin.
type Train interface{ Next() float64 }

// PoissonTrain has independent Poisson counts of mean Mu per bin.
type PoissonTrain struct {
	Mu  float64
	Rng *rand.Rand
}

// Next draws the next count.
func (p *PoissonTrain) Next() float64 { return Poisson(p.Rng, p.Mu) }

// BurstTrain starts a burst with probability Onset per bin; a burst adds
// Poisson(Mu) counts to each of the Span bins from its start (bursts may
// overlap). Counts are positively correlated at lags below Span.
type BurstTrain struct {
	Onset float64
	Span  int
	Mu    float64
	Rng   *rand.Rand

	active []int // remaining bins of each running burst
}

// Next draws the next count.
func (b *BurstTrain) Next() float64 {
	if b.Rng.Float64() < b.Onset {
		b.active = append(b.active, b.Span)
	}
	var n float64
	keep := b.active[:0]
	for _, r := range b.active {
		n += Poisson(b.Rng, b.Mu)
		if r > 1 {
			keep = append(keep, r-1)
		}
	}
	b.active = keep
	return n
}

// RefractoryTrain fires at most one spike per bin with hazard H, and none
// in the Dead bins after a spike: counts are negatively correlated at short
// lags.
type RefractoryTrain struct {
	H    float64
	Dead int
	Rng  *rand.Rand

	wait int
}

// Next draws the next count.
func (r *RefractoryTrain) Next() float64 {
	if r.wait > 0 {
		r.wait--
		return 0
	}
	if r.Rng.Float64() < r.H {
		r.wait = r.Dead
		return 1
	}
	return 0
}

// SlowTrain is Poisson with a rate that drifts slowly: Mu·(1 + Depth·sin(2πk/Period + φ)),
// φ drawn once, Period in bins (minutes of data). Counts are correlated over
// the whole block.
type SlowTrain struct {
	Mu, Depth, Period float64
	Rng               *rand.Rand

	k     int
	phase float64
	init  bool
}

// Next draws the next count.
func (s *SlowTrain) Next() float64 {
	if !s.init {
		s.phase, s.init = 2*math.Pi*s.Rng.Float64(), true
	}
	mu := s.Mu * (1 + s.Depth*math.Sin(2*math.Pi*float64(s.k)/s.Period+s.phase))
	s.k++
	return Poisson(s.Rng, math.Max(mu, 0))
}

// Unit is a linear–nonlinear–Poisson unit: the count in a bin is
// Poisson(exp(Base + Filter·x)), x the lagged stimulus (lag-major: the
// current frame first, then the previous ones), as in Chichilnisky (2001)
// and Paninski (2004).
type Unit struct {
	Filter []float64
	Base   float64
	Rng    *rand.Rand
}

// Next draws the count for the lagged stimulus x.
func (u *Unit) Next(x []float64) float64 {
	var drive float64
	for i, w := range u.Filter {
		drive += w * x[i]
	}
	return Poisson(u.Rng, math.Exp(u.Base+drive))
}

// Lagged keeps the last lags frames and writes the lagged stimulus vector.
type Lagged struct {
	pixels, lags int
	ring         [][]float64
	head, n      int
}

// NewLagged returns an empty history of lags frames of pixels pixels.
func NewLagged(pixels, lags int) *Lagged {
	l := &Lagged{pixels: pixels, lags: lags, ring: make([][]float64, lags)}
	for i := range l.ring {
		l.ring[i] = make([]float64, pixels)
	}
	return l
}

// Push adds a frame; Full reports whether lags frames have been seen.
func (l *Lagged) Push(frame []float64) {
	l.head = (l.head + 1) % l.lags
	copy(l.ring[l.head], frame)
	l.n++
}

// Full is true once the history holds lags frames.
func (l *Lagged) Full() bool { return l.n >= l.lags }

// To writes the lagged vector (lag-major) into x (pixels·lags).
func (l *Lagged) To(x []float64) {
	for lag := 0; lag < l.lags; lag++ {
		copy(x[lag*l.pixels:(lag+1)*l.pixels], l.ring[(l.head-lag+l.lags)%l.lags])
	}
}

// MixedMovie is a Gaussian movie whose even pixels follow an AR(1) process
// with coefficient A and whose odd pixels one with coefficient B, all of
// unit variance and independent of each other: its lag covariance is not
// the same temporal correlation times one spatial covariance (not
// separable), unlike Movie's.
type MixedMovie struct {
	A, B float64
	Rng  *rand.Rand

	state []float64
}

// Next advances the movie by one frame.
func (m *MixedMovie) Next(frame []float64) {
	if m.state == nil {
		m.state = make([]float64, len(frame))
		for i := range m.state {
			m.state[i] = m.Rng.NormFloat64()
		}
	}
	for i := range m.state {
		a := m.B
		if i%2 == 0 {
			a = m.A
		}
		m.state[i] = a*m.state[i] + math.Sqrt(1-a*a)*m.Rng.NormFloat64()
	}
	copy(frame, m.state)
}

// Variance is 1.
func (m *MixedMovie) Variance() float64 { return 1 }
