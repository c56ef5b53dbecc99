package online

import (
	"math"
	"runtime"
	"slices"
	"sync"
)

// shared holds what every unit's statistics read during one Update.
type shared struct {
	wh     []float64  // ridge weights of the half indicator
	pdiag  []float64  // sampling variance of each weight per unit σ² (zscore.go)
	t1, t2 float64    // hat-matrix traces
	lag    *lagShared // stimulus lag correlation, for the correlated-stimulus test
}

// scratch is one worker's buffers for per-unit statistics.
type scratch struct {
	w, wa, ha, hb, sta, cross, z []float64
	white                        *WhiteTest
	features                     *FeatureFinder
}

func (m *Mapper) newScratch() *scratch {
	d := m.dim
	s := &scratch{
		w: make([]float64, d), wa: make([]float64, d), ha: make([]float64, d), hb: make([]float64, d),
		sta: make([]float64, d), cross: make([]float64, d), z: make([]float64, d),
		white: NewWhiteTest(m.pixels, m.cfg.Lags),
	}
	// The config was checked by NewMapper, so the finder cannot fail.
	s.features, _ = NewFeatureFinder(m.cfg.Width, m.cfg.Height, m.cfg.Lags, m.cfg.FramePeriod, m.cfg.Geometry)
	return s
}

// Update folds the bins added since the last call into the estimates,
// recomputes every unit's statistics and returns a new Snapshot.
func (m *Mapper) Update() *Snapshot {
	m.ridge.Flush()
	m.updates++
	sh := shared{wh: make([]float64, m.dim), pdiag: make([]float64, m.dim)}
	if m.ridge.Rows() > 0 {
		if !m.cfg.White {
			m.ridge.WeightsTo(sh.wh, 0)
		}
		m.ridge.samplingDiagTo(sh.pdiag)
		sh.t1, sh.t2 = m.ridge.HatTraces()
		sh.lag = m.cal.shared(m.cfg.Lags, m.used, m.cfg.Lambda, m.ridge)
	}
	m.sta.CacheMeans()
	n := len(m.ids)
	details := make([]*UnitDetail, n)
	workers := min(runtime.GOMAXPROCS(0), n)
	var wg sync.WaitGroup
	for w := range workers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			s := m.newScratch()
			for u := w; u < n; u += workers {
				details[u] = m.unitDetail(u, &sh, s)
			}
		}()
	}
	wg.Wait()
	m.updateSTC(details)
	m.popPeak = medianPeak(details, m.popPeak)

	snap := m.emptySnapshot()
	snap.T = Float(float64(m.used) * m.cfg.FramePeriod)
	snap.Bins = m.used
	snap.Units = make([]UnitSummary, n)
	for u, d := range details {
		d.History = append(m.history[u], HistoryPoint{T: snap.T, Spikes: d.Spikes, Reliability: d.Reliability})
		m.history[u] = d.History
		snap.Units[u] = d.UnitSummary
		snap.details[d.ID] = d
	}
	snap.Summary = Summarize(snap.Units, m.cfg.Target, m.cfg.Fraction, m.cfg.Aperture, m.cfg.Geometry)
	m.snap = snap
	return snap
}

// unitDetail computes every statistic of unit u. It reads the shared state
// only, so units run in parallel.
func (m *Mapper) unitDetail(u int, sh *shared, s *scratch) *UnitDetail {
	cfg := &m.cfg
	d := &UnitDetail{
		Shape:       [3]int{cfg.Lags, cfg.Height, cfg.Width},
		FramePeriod: Float(cfg.FramePeriod),
	}
	d.ID = m.ids[u]
	d.Spikes = m.received[u]
	d.Flagged = m.flagged[u]
	nan := Float(math.NaN())
	d.Reliability, d.Significance, d.PValue, d.ETA, d.Intercept = nan, nan, nan, nan, nan
	seconds := m.cal.presentSeconds(u, m.used, cfg.FramePeriod) // since the unit appeared
	d.Rate = nan
	if seconds > 0 {
		d.Rate = Float(m.spikes[u] / seconds)
	}

	var intercept float64
	if m.ridge.Rows() > 0 {
		intercept = m.ridge.WeightsTo(s.w, m.colY(u))
		if !cfg.White {
			m.ridge.WeightsTo(s.wa, m.colA(u))
		}
	} else {
		clear(s.w)
		clear(s.wa)
	}
	d.Intercept = Float(intercept)
	m.sta.STATo(s.sta, u)
	m.sta.CrossTo(s.cross, u)

	// Noise variance; per-coefficient z from the sampling variance (zscore.go).
	dof := ResidualDOF(m.used, sh.t1, sh.t2)
	sigma2, rss := math.NaN(), math.NaN()
	if dof > 0 {
		rss = math.Max(m.ridge.Objective(m.colY(u))-cfg.Lambda*dot(s.w, s.w), 0)
		sigma2 = rss / dof
	}

	// Significance: the white-noise STA null, or the ridge posterior.
	var sig Significance
	var err error
	corr, perSpike := m.cal.correction(sh.lag, cfg.Lags, u, m.used, m.spikes[u])
	for i := range s.z {
		s.z[i] = s.w[i] / math.Sqrt(sigma2*corr.Mean*sh.pdiag[i])
		if math.IsNaN(s.z[i]) || math.IsInf(s.z[i], 0) {
			s.z[i] = 0
		}
	}
	if cfg.White {
		sig, err = s.white.Unit(nil, m.sta, u, cfg.PixelVariance)
		corr = SpikeCorrelation{Mean: 1, Var: 1} // the white test whitens exactly
	} else {
		sig, err = PosteriorTestCorrected(s.w, s.cross, rss, m.used, sh.t1, sh.t2, corr)
	}
	p := 1.0
	if err == nil {
		p = sig.P
		d.Significance = Float(sig.NegLog10P)
	} else {
		d.Significance = 0
	}
	d.PValue = Float(p)
	// Significance is decided at looks spending α over the block (sequential.go).
	look := &m.cal.looks[u]
	significant := look.update(m.spikes[u], p, cfg.Alpha)
	d.SignificantAtSpikes = look.at
	noField := m.cal.noFieldSpikes(u, m.updates, cfg, m.dim, corr, perSpike, significant)
	d.NoFieldSpikes = Float(noField)

	// Split halves: for a white stimulus the STAs of the two halves, which
	// are independent and each proportional to the filter; otherwise the
	// ridge fits of each half's counts (see halvesTo), which need many more
	// bins than dimensions before they stop underestimating.
	if cfg.White {
		m.sta.HalvesTo(s.ha, s.hb, u)
	} else {
		m.halvesTo(s.ha, s.hb, s.w, s.wa, sh.wh, u)
	}
	lo, hi := m.reliabilityWindow(s.w, significant)
	_, R := SplitHalf(s.ha[lo:hi], s.hb[lo:hi])
	d.Reliability = Float(R)
	d.PredictiveR = Float(m.unitPredictiveR(u, s.ha, s.hb, s.sta, s.cross))
	m.sta.STATo(s.sta, u) // the scratch is reused below
	m.checkDrift(d, u, significant, lo, hi, sh, s)

	fit := &m.fits[u]
	fitNow := significant && (!fit.ok || (m.updates+int64(u))%fitEvery == 0)
	s.features.MomentsOnly = !fitNow
	s.features.SkipSeparable = !fitNow && significant && fit.ok
	s.features.Warm = nil
	if fit.ok {
		s.features.Warm = &Features{CentreX: fit.cx, CentreY: fit.cy, SigmaX: fit.sx, SigmaY: fit.sy, Angle: fit.angle}
	}
	_ = s.features.FeaturesTo(&d.Features, s.w)
	switch {
	case fitNow:
		fit.save(&d.Features)
	case significant && fit.ok:
		fit.restore(&d.Features)
	default:
		fit.ok = false
	}
	d.PeakLag = d.Features.PeakLag
	d.LatencyMS = d.Features.LatencyMS
	d.CentreX, d.CentreY = d.Features.CentreX, d.Features.CentreY
	d.SigmaX, d.SigmaY = d.Features.SigmaX, d.Features.SigmaY
	d.Polarity = d.Features.Polarity
	d.Map = d.Features.Map

	reached := significant && persistentlyAbove(m.history[u], float64(d.Spikes), R, cfg.Target)
	d.Status = Classify(int64(m.spikes[u]), max(cfg.MinSpikes, int64(math.Min(noField, math.MaxInt64/2))), significant, reached)
	trend := m.trends[u]
	if last, _, ok := trend.Latest(); !math.IsNaN(R) && (!ok || m.spikes[u] > last) {
		trend.Add(m.spikes[u], R)
	}
	if significant {
		if eta, ok := trend.Project(float64(d.Rate), cfg.Target); ok {
			d.ETA = Float(eta)
		}
	}
	d.STA = FloatsOf(s.sta)
	d.Ridge = FloatsOf(s.w)
	d.Z = FloatsOf(s.z)
	return d
}

// reliabilityLags is the width of the lag window over which the split
// halves are compared: the main lobe of a field, without the many lags that
// hold only noise.
const reliabilityLags = 3

// reliabilityWindow returns the coefficient range [lo, hi) of the lag window
// for the split-half correlation: centred on the unit's own peak lag once
// the unit is significant (its field then decides the lag, not its noise),
// before that on the population's median peak lag, so that under the null
// the window does not depend on the unit's own data and r stays unbiased.
func (m *Mapper) reliabilityWindow(w []float64, significant bool) (lo, hi int) {
	centre := m.popPeak
	if significant {
		best := -1.0
		for l := range m.cfg.Lags {
			e := dot(w[l*m.pixels:(l+1)*m.pixels], w[l*m.pixels:(l+1)*m.pixels])
			if e > best {
				centre, best = l, e
			}
		}
	}
	n := min(reliabilityLags, m.cfg.Lags)
	first := min(max(centre-n/2, 0), m.cfg.Lags-n)
	return first * m.pixels, (first + n) * m.pixels
}

// fitEvery staggers the Gaussian fits and the space–time SVDs, the
// costliest per-unit steps: each significant unit is refitted every
// fitEvery updates, units taking turns, and keeps its last fit in between.
const fitEvery = 4

// shapeFit is a unit's last Gaussian fit and separable approximation,
// shown until the next refit. Spatial and Temporal are shared with earlier
// snapshots, which never write them.
type shapeFit struct {
	ok                                        bool
	cx, cy, sx, sy, angle, cxd, cyd, sxd, syd Float
	separability                              Float
	spatial, temporal                         Floats
}

func (f *shapeFit) save(ft *Features) {
	*f = shapeFit{true, ft.CentreX, ft.CentreY, ft.SigmaX, ft.SigmaY, ft.Angle,
		ft.CentreXDeg, ft.CentreYDeg, ft.SigmaXDeg, ft.SigmaYDeg,
		ft.Separability, ft.Spatial, ft.Temporal}
}

func (f *shapeFit) restore(ft *Features) {
	ft.CentreX, ft.CentreY, ft.SigmaX, ft.SigmaY, ft.Angle = f.cx, f.cy, f.sx, f.sy, f.angle
	ft.CentreXDeg, ft.CentreYDeg, ft.SigmaXDeg, ft.SigmaYDeg = f.cxd, f.cyd, f.sxd, f.syd
	ft.Separability, ft.Spatial, ft.Temporal = f.separability, f.spatial, f.temporal
}

// halvesTo writes the two split-half ridge estimates of unit u. With y_A the
// counts in half A, the ridge fit of y_A over all bins is w_A; removing
// ȳ_A times the fit w_h of the half indicator h leaves the fit of half A's
// counts centred within half A, and likewise for half B (whose indicator
// 1 − h has fit −w_h, since the intercept absorbs constants). Under the null
// the two depend on disjoint, independent bins.
func (m *Mapper) halvesTo(a, b, w, wa, wh []float64, u int) {
	meanA, meanB := 0.0, 0.0
	if m.usedA > 0 {
		meanA = m.spikesA[u] / float64(m.usedA)
	}
	if nb := m.used - m.usedA; nb > 0 {
		meanB = (m.spikes[u] - m.spikesA[u]) / float64(nb)
	}
	for i := range a {
		a[i] = wa[i] - meanA*wh[i]
		b[i] = w[i] - wa[i] + meanB*wh[i]
	}
}

func dot(a, b []float64) float64 {
	var s float64
	for i, v := range a {
		s += v * b[i]
	}
	return s
}

// stcEvery is how many updates pass between two STC refreshes. Each refresh
// decomposes one unit's covariance (O(d³) in the reduced space), taking the
// units in turn, so the cost per update stays bounded.
const stcEvery = 2

// stcMinSamples is how many effective spike-triggered samples per dimension
// STC waits for before it reports: with fewer, the sample covariance's
// spectrum is too wide for the random-matrix bound to mean much (common
// practice, no source).
const stcMinSamples = 2

// updateSTC starts STC for flagged units and for units with no linear field
// (within the cap), refreshes one unit's result in turn, and attaches the
// latest results to the details. STC needs a white stimulus, whose prior
// covariance c²I is known.
func (m *Mapper) updateSTC(details []*UnitDetail) {
	if !m.cfg.White {
		return
	}
	if m.stcLags == nil {
		m.stcLags = m.stcWindow(details)
	}
	for u, d := range details {
		if m.stc[u] != nil || len(m.stc) >= m.cfg.STCMaxUnits {
			continue
		}
		if m.flagged[u] || d.Status == NoField {
			if s, err := NewSTC(m.pixels, m.stcLags); err == nil {
				m.stc[u] = s
			}
		}
	}
	if len(m.stc) == 0 {
		return
	}
	if m.updates%stcEvery == 0 {
		units := make([]int, 0, len(m.stc))
		for u := range m.stc {
			units = append(units, u)
		}
		slices.Sort(units)
		u := units[m.stcTurn%len(units)]
		m.stcTurn++
		// The null bound needs many more samples than dimensions.
		if acc := m.stc[u]; acc.Effective() >= stcMinSamples*float64(acc.Dim()) {
			if res, err := acc.Result(m.cfg.PixelVariance, math.NaN(), math.NaN()); err == nil {
				res.Spikes = int64(acc.Spikes())
				m.stcResults[u] = &res
			}
		}
	}
	for u, d := range details {
		if r := m.stcResults[u]; r != nil && m.stc[u] != nil {
			d.STC = r
			d.HasSTC = true
		}
	}
}

// stcWindow picks STC's lags: STCLags lags centred on the median peak lag of
// the significant units, or on the lag nearest 60 ms when there is none yet.
func (m *Mapper) stcWindow(details []*UnitDetail) []int {
	centre := medianPeak(details, m.defaultPeak())
	n := m.cfg.STCLags
	first := min(max(centre-n/2, 0), m.cfg.Lags-n)
	lags := make([]int, n)
	for i := range lags {
		lags[i] = first + i
	}
	return lags
}

// medianPeak is the median peak lag of the significant units, or old when
// there is none.
func medianPeak(details []*UnitDetail, old int) int {
	var peaks []int
	for _, d := range details {
		if d.Status == Emerging || d.Status == Reliable {
			peaks = append(peaks, d.PeakLag)
		}
	}
	if len(peaks) == 0 {
		return old
	}
	slices.Sort(peaks)
	return peaks[len(peaks)/2]
}
