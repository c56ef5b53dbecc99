package synth

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"

	"livefield/stream/stimulus"
)

// Unit kinds.
const (
	KindSimple         = "simple"          // Gabor field, exponential nonlinearity
	KindCentreSurround = "centre-surround" // difference of Gaussians, on or off centre
	KindDirection      = "direction"       // drifting Gabor across lags (space–time oriented)
	KindComplex        = "complex"         // energy model: quadrature pair, squared and summed
	KindNone           = "none"            // Poisson at a constant rate, no field
	KindLowRate        = "low-rate"        // a simple cell firing at LowRate
	KindLate           = "late"            // a simple cell that starts firing at LateAt
)

// mix is the default population, in the order units are drawn: a scenario
// of n units takes the first n (cycling for n above len(mix)).
var mix = []string{
	KindSimple, KindCentreSurround, KindComplex, KindSimple, KindCentreSurround,
	KindNone, KindDirection, KindSimple, KindLowRate, KindLate, KindSimple,
	KindComplex, KindCentreSurround, KindNone, KindSimple,
}

// DefaultUnits is the size of the default population.
var DefaultUnits = len(mix)

// Defaults of a Scenario.
const (
	DefaultChannels = 32
	DefaultSide     = 16
	DefaultLags     = 12
	DefaultPeriod   = 1.0 / 60
	DefaultMeanRate = 8.0  // Hz
	DefaultLowRate  = 0.5  // Hz
	DefaultLateAt   = 30.0 // seconds after Start
	DefaultGain     = 1.0
	// MaxRate caps the model rate of any unit, in Hz.
	MaxRate = 500.0
	// ContactPitchUM is the spacing of the probe's contacts, in µm.
	ContactPitchUM = 25.0
)

// Scenario describes a synthetic recording. Zero fields take the defaults.
type Scenario struct {
	Channels      int     // probe contacts (default 32)
	Width, Height int     // stimulus frame in pixels (default 16×16; must match the source)
	Lags          int     // lags of the true filters (default 12)
	FramePeriod   float64 // seconds per frame and bin (default 1/60)
	Seed          uint64  // everything random (fields, spikes) follows from it
	Units         int     // number of units (0 = the default mix of DefaultUnits)
	MeanRate      float64 // mean rate of a responsive unit under white noise, Hz (default 8)
	LowRate       float64 // mean rate of the low-rate unit, Hz (default 0.5)
	Start         float64 // acquisition time of the block start, seconds (default 0)
	LateAt        float64 // the late unit fires from Start+LateAt on (default 30 s)
	// Gain is the slope g of the exponential nonlinearity on the
	// unit-variance filter response (default 1).
	Gain float64
}

func (sc *Scenario) fill() error {
	def := func(v *int, d int) {
		if *v == 0 {
			*v = d
		}
	}
	deff := func(v *float64, d float64) {
		if *v == 0 {
			*v = d
		}
	}
	def(&sc.Channels, DefaultChannels)
	def(&sc.Width, DefaultSide)
	def(&sc.Height, DefaultSide)
	def(&sc.Lags, DefaultLags)
	def(&sc.Units, DefaultUnits)
	deff(&sc.FramePeriod, DefaultPeriod)
	deff(&sc.MeanRate, DefaultMeanRate)
	deff(&sc.LowRate, DefaultLowRate)
	deff(&sc.LateAt, DefaultLateAt)
	deff(&sc.Gain, DefaultGain)
	switch {
	case sc.Channels < 0 || sc.Width < 0 || sc.Height < 0 || sc.Lags < 0 || sc.Units < 0:
		return errors.New("synth: negative size in scenario")
	case sc.Width*sc.Height > 1<<16 || sc.Lags > 256 || sc.Units > 4096 || sc.Channels > 4096:
		return errors.New("synth: scenario too large")
	case !(sc.FramePeriod > 0 && sc.FramePeriod <= 10):
		return fmt.Errorf("synth: frame period %g s not in (0, 10]", sc.FramePeriod)
	case !(sc.MeanRate > 0 && sc.MeanRate <= MaxRate) || !(sc.LowRate > 0 && sc.LowRate <= MaxRate):
		return errors.New("synth: rates must be in (0, 500] Hz")
	case !(sc.Gain > 0 && sc.Gain <= 4):
		return fmt.Errorf("synth: gain %g not in (0, 4]", sc.Gain)
	case math.IsNaN(sc.Start) || math.IsInf(sc.Start, 0) || sc.Start < 0 || math.IsNaN(sc.LateAt) || math.IsInf(sc.LateAt, 0) || sc.LateAt < 0:
		return errors.New("synth: start and late-at must be finite and non-negative")
	}
	return nil
}

// unit is the model of one cell.
type unit struct {
	w      []float64 // linear filter (unit norm), or first of the pair
	w2     []float64 // second of the quadrature pair (complex cells)
	base   float64   // rate scale r0, Hz
	gain   float64
	appear float64 // acquisition time from which it fires
	kind   string
}

// Cortex is the model cortex under a synthetic probe: a population of
// linear–nonlinear–Poisson units watching a stimulus source. It is not
// safe for concurrent use.
type Cortex struct {
	sc    Scenario
	src   stimulus.Source
	sd    float64 // pixel standard deviation used to normalise responses
	units []unit
	truth []Truth

	ring    [][]float64 // the last Lags frames, by bin modulo Lags
	ringBin []int64     // the bin each ring slot holds (-1: none)
	pcg     *rand.PCG
	rng     *rand.Rand
	spikes  []spike
}

type spike struct {
	t    float64
	unit int
}

// New builds the population of sc watching src, whose frame size must be
// the scenario's (a zero Width and Height take the source's).
func New(sc Scenario, src stimulus.Source) (*Cortex, error) {
	if src == nil {
		return nil, errors.New("synth: nil stimulus source")
	}
	if sc.Width == 0 && sc.Height == 0 {
		sc.Width, sc.Height = src.Width(), src.Height()
	}
	if err := sc.fill(); err != nil {
		return nil, err
	}
	if src.Width() != sc.Width || src.Height() != sc.Height {
		return nil, fmt.Errorf("synth: source is %d×%d, scenario %d×%d", src.Width(), src.Height(), sc.Width, sc.Height)
	}
	sd := 1.0
	if src.White() && src.PixelVariance() > 0 {
		sd = math.Sqrt(src.PixelVariance())
	}
	r := &Cortex{sc: sc, src: src, sd: sd}
	r.build()
	n := sc.Width * sc.Height
	r.ring = make([][]float64, sc.Lags)
	r.ringBin = make([]int64, sc.Lags)
	for i := range r.ring {
		r.ring[i] = make([]float64, n)
		r.ringBin[i] = -1
	}
	r.pcg = rand.NewPCG(sc.Seed, 0)
	r.rng = rand.New(r.pcg)
	return r, nil
}

// Scenario returns the scenario in force, defaults filled in.
func (r *Cortex) Scenario() Scenario { return r.sc }

// Units returns the ground truth of every unit, in the order of the mix.
// The filters are shared with the rig and must not be modified.
func (r *Cortex) Units() []Truth { return slices.Clone(r.truth) }

// build draws the population from the seed.
func (r *Cortex) build() {
	sc := r.sc
	rng := rand.New(rand.NewPCG(sc.Seed, 0x5eed))
	W, H, L := sc.Width, sc.Height, sc.Lags
	side := float64(min(W, H))
	perChannel := make(map[int]int)
	for i := range sc.Units {
		kind := mix[i%len(mix)]
		// Units spread along the probe, a little jittered.
		ch := (i*sc.Channels)/sc.Units + rng.IntN(max(1, sc.Channels/sc.Units))
		ch = min(ch, sc.Channels-1)
		perChannel[ch]++
		t := Truth{
			ID:        fmt.Sprintf("ch%02d.%d", ch, perChannel[ch]),
			Kind:      kind,
			Channel:   ch,
			DepthUM:   float64(ch) * ContactPitchUM,
			AppearsAt: sc.Start,
			Shape:     [3]int{L, H, W},
		}
		// Retinotopy: fields scatter around the middle of the screen.
		cx := clamp(float64(W-1)/2+rng.NormFloat64()*side/8, 2, float64(W-3))
		cy := clamp(float64(H-1)/2+rng.NormFloat64()*side/8, 2, float64(H-3))
		latency := 0.040 + 0.050*rng.Float64()
		width := latency / 3
		sigma := side * (0.08 + 0.05*rng.Float64())
		theta := math.Pi * rng.Float64()
		pol := 1
		if rng.IntN(2) == 1 {
			pol = -1
		}
		g := gabor{cx: cx, cy: cy, sx: sigma, sy: 1.4 * sigma, theta: theta, lambda: 3 * sigma}
		u := unit{kind: kind, gain: sc.Gain, appear: sc.Start}
		rate := sc.MeanRate
		switch kind {
		case KindSimple, KindLowRate, KindLate, KindDirection:
			if kind == KindLowRate {
				rate = sc.LowRate
			}
			if kind == KindLate {
				u.appear = sc.Start + sc.LateAt
			}
			u.w = make([]float64, L*H*W)
			// The direction-selective cell's carrier drifts by an eighth
			// of a cycle per lag under a wider monophasic envelope, so its
			// field is oriented in space–time (not separable).
			drift := 0.0
			if kind == KindDirection {
				drift = math.Pi / 4
				width = latency / 2
				t.DirectionRad = theta
				t.DriftHz = drift / (2 * math.Pi * sc.FramePeriod)
			}
			for k := range L {
				h := temporal(float64(k)*sc.FramePeriod, latency, width)
				if kind == KindDirection {
					h = math.Exp(-sq((float64(k)*sc.FramePeriod-latency)/width) / 2)
				}
				for y := range H {
					for x := range W {
						u.w[(k*H+y)*W+x] = float64(pol) * h * g.at(float64(x), float64(y), -drift*float64(k))
					}
				}
			}
			normalise(u.w)
			t.SigmaX, t.SigmaY = g.sx, g.sy
			t.Orientation = theta
		case KindCentreSurround:
			d := dog{cx: cx, cy: cy, sc: sigma, ss: 2.5 * sigma, k: 0.8}
			u.w = make([]float64, L*H*W)
			for k := range L {
				h := temporal(float64(k)*sc.FramePeriod, latency, width)
				for y := range H {
					for x := range W {
						u.w[(k*H+y)*W+x] = float64(pol) * h * d.at(float64(x), float64(y))
					}
				}
			}
			normalise(u.w)
			t.SigmaX, t.SigmaY = sigma, sigma
			t.Surround = d.ss
		case KindComplex:
			u.w = make([]float64, L*H*W)
			u.w2 = make([]float64, L*H*W)
			for k := range L {
				h := temporal(float64(k)*sc.FramePeriod, latency, width)
				for y := range H {
					for x := range W {
						u.w[(k*H+y)*W+x] = h * g.at(float64(x), float64(y), 0)
						u.w2[(k*H+y)*W+x] = h * g.at(float64(x), float64(y), math.Pi/2)
					}
				}
			}
			normalise(u.w)
			orthogonalise(u.w2, u.w)
			t.Pair = [][]float64{u.w, u.w2}
			t.SigmaX, t.SigmaY = g.sx, g.sy
			t.Orientation = theta
			pol = 0
		case KindNone:
			pol = 0
		}
		if u.w != nil && u.w2 == nil {
			t.Filter = u.w
		}
		if kind != KindNone {
			t.CentreX, t.CentreY = cx, cy
			t.LatencyMS = latency * 1000
			t.PeakLag = peakLag(L, sc.FramePeriod, latency, width)
		}
		t.Polarity = pol
		t.AppearsAt = u.appear
		t.RateHz = rate
		// Rate scale: for the exponential units E[exp(g·x)] = exp(g²/2)
		// for x ~ N(0, 1), so base = rate·exp(−g²/2) gives the mean rate
		// (to the Gaussian approximation of the filter response); the
		// energy units' E[(x₁²+x₂²)/2] = 1 under white noise.
		u.base = rate
		if u.w != nil && u.w2 == nil {
			u.base = rate * math.Exp(-sc.Gain*sc.Gain/2)
		}
		r.units = append(r.units, u)
		r.truth = append(r.truth, t)
	}
}

func clamp(v, lo, hi float64) float64 { return math.Max(lo, math.Min(hi, v)) }
func sq(v float64) float64            { return v * v }

// Bin produces the spikes of bin k, which runs from start to end (seconds,
// acquisition clock) while stimulus frame frameIndex is on screen. The rig
// remembers the frames of the last Lags bins it was given; a lag whose bin
// it was not given counts as a blank (zero) frame. emit is called once per
// spike in time order; the spike times are uniform within the bin. The
// spikes of bin k depend only on the seed, k and the frames, not on which
// bins were asked for before. Bin does not allocate in steady state.
func (r *Cortex) Bin(k, frameIndex int64, start, end float64, emit func(unit string, t float64)) error {
	if k < 0 {
		return fmt.Errorf("synth: negative bin %d", k)
	}
	if !(end > start) || math.IsInf(end, 0) || math.IsNaN(start) {
		return fmt.Errorf("synth: bin %d from %g to %g s is empty", k, start, end)
	}
	L := int64(r.sc.Lags)
	slot := int(k % L)
	if err := r.src.FrameTo(r.ring[slot], frameIndex); err != nil {
		r.ringBin[slot] = -1
		return fmt.Errorf("synth: frame %d: %w", frameIndex, err)
	}
	r.ringBin[slot] = k
	r.pcg.Seed(r.sc.Seed, uint64(k)+1)
	r.spikes = r.spikes[:0]
	dur := end - start
	for i := range r.units {
		u := &r.units[i]
		if start < u.appear {
			continue
		}
		lambda := r.rate(u, k) * dur
		for range poisson(r.rng, lambda) {
			r.spikes = append(r.spikes, spike{t: start + dur*r.rng.Float64(), unit: i})
		}
	}
	slices.SortFunc(r.spikes, func(a, b spike) int {
		switch {
		case a.t < b.t:
			return -1
		case a.t > b.t:
			return 1
		}
		return a.unit - b.unit
	})
	for _, s := range r.spikes {
		emit(r.truth[s.unit].ID, s.t)
	}
	return nil
}

// rate is the model rate (Hz) of u in bin k, from the frames in the ring.
func (r *Cortex) rate(u *unit, k int64) float64 {
	switch {
	case u.w == nil:
		return u.base
	case u.w2 == nil:
		return math.Min(MaxRate, u.base*math.Exp(u.gain*r.response(u.w, k)))
	default:
		a, b := r.response(u.w, k), r.response(u.w2, k)
		return math.Min(MaxRate, u.base*(0.1+0.9*(a*a+b*b)/2))
	}
}

// response is the filter output on the lagged frames, divided by the pixel
// standard deviation so that it has unit variance under white noise.
func (r *Cortex) response(w []float64, k int64) float64 {
	L := int64(r.sc.Lags)
	n := r.sc.Width * r.sc.Height
	var sum float64
	for lag := range L {
		b := k - lag
		if b < 0 {
			break
		}
		slot := int(b % L)
		if r.ringBin[slot] != b {
			continue
		}
		f := r.ring[slot]
		wl := w[int(lag)*n : int(lag+1)*n]
		var s float64
		for i, v := range f {
			s += v * wl[i]
		}
		sum += s
	}
	return sum / r.sd
}

// poisson draws a Poisson count of mean lambda: by Knuth's product of
// uniforms for lambda ≤ 30, and as a sum of such draws above (a sum of
// independent Poisson counts is Poisson with the summed mean).
func poisson(rng *rand.Rand, lambda float64) int {
	if !(lambda > 0) {
		return 0
	}
	n := 0
	for lambda > 30 {
		n += knuth(rng, 30)
		lambda -= 30
	}
	return n + knuth(rng, lambda)
}

func knuth(rng *rand.Rand, lambda float64) int {
	limit := math.Exp(-lambda)
	p := rng.Float64()
	n := 0
	for p > limit {
		p *= rng.Float64()
		n++
	}
	return n
}
