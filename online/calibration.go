package online

import "math"

// calibration is the Mapper's state for the calibrated statistics: the
// counts' and the stimulus's autocorrelation for the correlated-stimulus
// test, each unit's sequential looks, the bin each unit first appeared in,
// and whether the lag history must restart.
type calibration struct {
	counts *countAutocov
	frames *frameAutocorr // nil for a white stimulus
	looks  []lookState
	first  []int64      // per unit, used bins before it was registered
	sumSq  [][2]float64 // per unit, Σy² in half A and in half B
	drift  []driftState
	// restart: the next frame starts a new lag history (after a pause or a
	// refused bin).
	restart bool
	// trace caches lagTraces, computed at traceAt used bins.
	trace   []float64
	traceAt int64
}

func newCalibration(cfg *Config, pixels int) *calibration {
	c := &calibration{counts: newCountAutocov(autocorrLags)}
	if !cfg.White {
		c.frames = newFrameAutocorr(pixels, autocorrLags+cfg.Lags-1)
	}
	return c
}

// addUnit registers one more unit, present from used bin `used` on.
func (c *calibration) addUnit(used int64) {
	c.looks = append(c.looks, lookState{})
	c.first = append(c.first, used)
	c.sumSq = append(c.sumSq, [2]float64{})
	c.drift = append(c.drift, driftState{})
	c.counts.grow(len(c.looks))
}

// addFrame records a frame that was accepted.
func (c *calibration) addFrame(frame []float64) {
	if c.frames != nil {
		c.frames.add(frame, c.restart)
	}
	c.restart = false
}

// addCounts records the counts of used bin b, in split half A or B.
func (c *calibration) addCounts(b int64, halfA bool, counts []Count) {
	h := 1
	if halfA {
		h = 0
	}
	for _, n := range counts {
		if n.N != 0 {
			before := c.counts.add(n.Unit, b, n.N)
			c.sumSq[n.Unit][h] += n.N * (2*before + n.N)
		}
	}
}

func (c *calibration) reset() {
	c.counts.reset()
	if c.frames != nil {
		c.frames.reset()
	}
	for i := range c.looks {
		c.looks[i] = lookState{}
		c.first[i] = 0
		c.sumSq[i] = [2]float64{}
		c.drift[i] = driftState{}
	}
	c.restart = false
	c.trace, c.traceAt = nil, 0
}

// lagShared is what every unit's correlation correction reads in one
// Update: the stimulus's temporal autocorrelation and the lag directions.
type lagShared struct {
	rho, tau, vecs, h []float64
	// trace[d+K] = tr(M Γ(d)) for d = −K…K from the full lag covariances
	// (nil when the frames are too large to keep them).
	trace []float64
}

func (c *calibration) shared(lags int, n int64, lambda float64, ridge *Ridge) *lagShared {
	if c.frames == nil || n == 0 {
		return nil
	}
	ls := &lagShared{rho: make([]float64, autocorrLags+lags)}
	c.frames.rhoTo(ls.rho)
	ls.tau, ls.vecs, ls.h = c.frames.lagModel(ls.rho, lags, n, lambda)
	// Only the ratios tr(M Γ(d))/tr(M Γ(0)) are used, and they change
	// slowly as bins accrue: recompute when n has grown by a tenth.
	if c.trace == nil || float64(n) >= 1.1*float64(c.traceAt) {
		c.trace, c.traceAt = c.frames.lagTraces(ridge, lags), n
	}
	ls.trace = c.trace
	return ls
}

// exactFramesPerPixel is how many frames per pixel the full lag covariances
// need before they replace the separable model: with fewer their sampling
// noise outweighs the model's error (at 5 s on a 6×6 AR(0.7) movie the
// separable model holds 10-bin bursts at 4 of 100 below p = 0.05, the full
// covariances at 11 of 50).
const exactFramesPerPixel = 20

// lagTraces returns tr(M Γ(d)) for d = −K…K (index d + K), K = autocorrLags:
// block (i, j) of Γ(d) = Cov(x_k, x_{k+d}) is γ(d + i − j), so
// tr(M Γ(d)) = Σ_δ ⟨M̄_δ, γ(d + δ)⟩ with M̄_δ = Σ_{i−j=δ} M_ij and
// γ(−τ) = γ(τ)ᵀ. Nil when the full lag covariances are not kept.
func (f *frameAutocorr) lagTraces(ridge *Ridge, L int) []float64 {
	if f.cross == nil || ridge == nil || ridge.Rows() == 0 || f.pairs[0] < exactFramesPerPixel*int64(f.pixels) {
		return nil
	}
	P, K := f.pixels, autocorrLags
	gamma := make([][]float64, K+L)
	for tau := range gamma {
		gamma[tau] = make([]float64, P*P)
		if !f.gammaTo(gamma[tau], tau) {
			return nil
		}
	}
	mbar := ridge.lagBlockSums(P, L)
	out := make([]float64, 2*K+1)
	for d := -K; d <= K; d++ {
		var s float64
		for delta := -(L - 1); delta <= L-1; delta++ {
			tau := d + delta
			m := mbar[delta+L-1]
			if tau >= 0 {
				s += dot(m, gamma[tau])
				continue
			}
			g := gamma[-tau]
			for p := 0; p < P; p++ {
				for q := 0; q < P; q++ {
					s += m[p*P+q] * g[q*P+p]
				}
			}
		}
		out[d+K] = s
	}
	return out
}

// correction is unit u's SpikeCorrelation over n used bins with sy spikes,
// and its spikes per unit of count variance, sy/A(0) (1 for Poisson counts).
func (c *calibration) correction(ls *lagShared, lags, u int, n int64, sy float64) (SpikeCorrelation, float64) {
	a := make([]float64, autocorrLags+1)
	c.counts.autocovTo(a, u, n, sy)
	perSpike := 1.0
	if a[0] > 0 && sy > 0 {
		perSpike = math.Min(sy/a[0], 1/(1-math.Min(sy/float64(n), 0.5)))
	}
	if ls == nil {
		return SpikeCorrelation{1, 1}, perSpike
	}
	corr := spikeCorrelation(a, ls.rho, lags, ls.h, ls.tau, ls.vecs)
	if ls.trace != nil {
		// The mean from the full lag covariances, Σ_d A(d) tr(M Γ(d)) over
		// A(0) tr(M Γ(0)); the variance keeps the separable model's shape
		// (its ν), scaled to that mean.
		K := autocorrLags
		if c0 := ls.trace[K]; c0 > 0 && a[0] > 0 {
			m := a[0] * c0
			for d := 1; d <= K; d++ {
				m += a[d] * (ls.trace[K+d] + ls.trace[K-d])
			}
			if mean := m / (a[0] * c0); mean > 0 {
				r := mean / corr.Mean
				corr = SpikeCorrelation{Mean: mean, Var: corr.Var * r * r}
			}
		}
	}
	return corr, perSpike
}

// noFieldEvery is how many updates pass between two refreshes of a unit's
// detection spike count (units take turns); it changes slowly.
const noFieldEvery = 16

// noFieldSpikes is the spike count from which unit u may be called "no
// field" (DetectionSpikes for the smallest field), refreshed every
// noFieldEvery updates; +Inf for a significant unit.
func (c *calibration) noFieldSpikes(u int, updates int64, cfg *Config, dim int, corr SpikeCorrelation, perSpike float64, significant bool) float64 {
	if significant {
		return math.Inf(1)
	}
	l := &c.looks[u]
	if l.noField == 0 || (updates+int64(u))%noFieldEvery == 0 {
		l.noField = DetectionSpikes(cfg.Alpha, cfg.SmallestField, dim, corr, perSpike)
	}
	return l.noField
}

// presentSeconds is how long unit u has been present in the block.
func (c *calibration) presentSeconds(u int, used int64, period float64) float64 {
	return math.Max(float64(used-c.first[u]), 0) * period
}

// RestartLags starts a new lag history: the next Lags−1 bins fill it and are
// not used, so no bin is regressed on frames from before a break in time.
// Call it after a pause in the stimulus (the ingest does after more than
// 10 s without frames); AddBin calls it itself after refusing a bin. The
// estimates so far are kept, and the lag Gram starts a new segment, so that
// the exact re-solve leaves out the rows that would span the break.
func (m *Mapper) RestartLags() {
	m.added = 0
	m.cal.restart = true
	m.gram.Restart()
}
