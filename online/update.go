package online

import (
	"fmt"
	"math"
	"runtime"
	"slices"
	"sync"
	"sync/atomic"
)

// ridgeCommon holds the ridge and stimulus quantities that every unit's
// statistics read during one Update.
type ridgeCommon struct {
	wh     []float64  // ridge weights of the half indicator
	pdiag  []float64  // sampling variance of each weight per unit σ² (zscore.go); kept by the snapshot
	t1, t2 float64    // hat-matrix traces
	lag    *lagShared // stimulus lag correlation, for the correlated-stimulus test
}

// scratch is one worker's buffers for per-unit statistics.
type scratch struct {
	// w and sta are set by unitDetail to the arrays of the unit's
	// snapshot; the others are reused from unit to unit.
	w, wa, ha, hb, sta, cross []float64
	pa, pb                    []float64 // the predictive check's scratch; on white noise the STA halves
	energy                    []float64 // Σ w² of each lag (weightsEnergiesTo)
	white                     *WhiteTest
	features                  *FeatureFinder
}

func (m *Mapper) newScratch() *scratch {
	d := m.dim
	s := &scratch{
		wa: make([]float64, d), ha: make([]float64, d), hb: make([]float64, d), cross: make([]float64, d),
		pa: make([]float64, d), pb: make([]float64, d), energy: make([]float64, m.cfg.Lags),
		white: NewWhiteTest(m.pixels, m.cfg.Lags),
	}
	// The config was checked by NewMapper, so the finder cannot fail.
	s.features, _ = NewFeatureFinder(m.cfg.Width, m.cfg.Height, m.cfg.Lags, m.cfg.FramePeriod, m.cfg.Geometry)
	return s
}

// Update folds the bins added since the last call into the estimates,
// recomputes every unit's statistics and returns a new Snapshot.
func (m *Mapper) Update() *Snapshot {
	if w := m.prior.worker; w != nil {
		// The background prior fits pause while the update runs (an
		// evaluation in hand stops at its next checkpoint, see updateGate),
		// so they use only the time the update leaves free.
		w.gate.close()
		defer w.gate.open()
	}
	m.fold()
	m.updates++
	sh := &m.common
	if len(sh.wh) != m.dim {
		sh.wh = make([]float64, m.dim)
	}
	clear(sh.wh)
	// pdiag is new each update: the snapshot's z scores keep it.
	sh.pdiag = make([]float64, m.dim)
	sh.t1, sh.t2 = 0, 0
	if m.ridge.Rows() > 0 {
		m.ridge.WeightsTo(sh.wh, 0)
		sh.t1, sh.t2 = m.ridge.samplingDiagTraces(sh.pdiag)
		sh.lag = m.cal.shared(m.cfg.Lags, m.used, m.cfg.Lambda, m.ridge)
	}
	m.sta.CacheMeans()
	n := len(m.ids)
	details := make([]*UnitDetail, n)
	m.planRefits(n)
	// The per-unit work on every core, units handed out one at a time; the
	// STC refresh of one unit alongside.
	workers := max(1, min(runtime.GOMAXPROCS(0), n))
	for len(m.scratch) < workers {
		m.scratch = append(m.scratch, m.newScratch())
	}
	var wg sync.WaitGroup
	var next atomic.Int64
	for w := range workers {
		wg.Go(func() {
			s := m.scratch[w]
			for u := int(next.Add(1) - 1); u < n; u = int(next.Add(1) - 1) {
				details[u] = m.unitDetail(u, sh, s)
			}
		})
	}
	refreshed := m.refreshSTC()
	wg.Wait()
	if refreshed != nil {
		refreshed()
	}
	m.updateSTC(details)
	m.popPeak = medianPeak(details, m.popPeak)
	m.livePrior(details)

	snap := m.emptySnapshot()
	snap.T = Float(float64(m.used) * m.cfg.FramePeriod)
	snap.Bins = m.used
	snap.Solve = m.solve
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
func (m *Mapper) unitDetail(u int, sh *ridgeCommon, s *scratch) *UnitDetail {
	cfg := &m.cfg
	d := &UnitDetail{
		Shape:       [3]int{cfg.Lags, cfg.Height, cfg.Width},
		FramePeriod: Float(cfg.FramePeriod),
	}
	// The ridge and STA arrays of the snapshot are the scratch of this
	// unit's computation (no copies).
	arrays, views := newFloatArrays(2, m.dim)
	d.Ridge, d.STA = arrays[0], arrays[1]
	s.w, s.sta = views[0], views[1]
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

	// The weights, and in the same pass |w|² (the residual sum) and each
	// lag's share, which the drift check's window and the features read.
	var intercept, wSq float64
	if m.ridge.Rows() > 0 {
		intercept, wSq = m.weightsEnergiesTo(s.w, s.energy, m.colY(u))
	} else {
		clear(s.w)
		clear(s.energy)
	}
	d.Intercept = Float(intercept)
	if cfg.White {
		// The STA halves too, for the predictive check, in the same pass.
		m.sta.crossHalvesTo(s.cross, s.sta, s.pa, s.pb, u)
	} else {
		m.sta.CrossTo(s.cross, u)
		staFromCross(s.sta, s.cross, m.sta.Spikes(u))
	}

	// Noise variance; per-coefficient z from the sampling variance (zscore.go).
	dof := ResidualDOF(m.used, sh.t1, sh.t2)
	sigma2, rss := math.NaN(), math.NaN()
	if dof > 0 {
		rss = math.Max(m.ridge.Objective(m.colY(u))-cfg.Lambda*wSq, 0)
		sigma2 = rss / dof
	}

	// Significance: the white-noise STA null, or the ridge posterior.
	var sig Significance
	var err error
	corr, perSpike := m.cal.correction(sh.lag, cfg.Lags, u, m.used, m.spikes[u])
	d.zScale, d.zDiag = sigma2*corr.Mean, sh.pdiag // z, when asked (Snapshot.Detail)
	if cfg.White {
		sig, err = s.white.UnitCross(nil, s.cross, m.sta, u, cfg.PixelVariance)
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

	// Split halves: the ridge fits of each half's counts (see halvesTo),
	// independent under the null and summing to the unit's ridge, compared
	// over all coefficients, so that R is the reliability of the ridge
	// estimate itself and √R its correlation with its expectation
	// (classical test theory; TestMapperPriorLive checks it against the
	// true filter). The STA halves in a window of reliabilityLags lags
	// around the peak, used before on white noise, overstated it: the
	// window leaves out the noise of the other lags, and the ridge's noise
	// is larger than the STA's where the Gram matrix departs from N·c²I.
	sumA, sumB := m.halvesTo(s.ha, s.hb, s.w, sh.wh, u)
	lo, hi := m.reliabilityWindow(s.energy, significant)
	_, R := splitHalfSums(s.ha, s.hb, sumA, sumB)
	d.Reliability = Float(R)
	if cfg.White {
		// The predictive correlation keeps the STA halves on white noise,
		// as before (predict.go); crossHalvesTo wrote them to pa and pb,
		// and this path needs no other scratch.
		d.PredictiveR = Float(m.unitPredictiveR(u, s.pa, s.pb, nil, nil, true))
	} else {
		d.PredictiveR = Float(m.unitPredictiveR(u, s.ha, s.hb, s.pa, s.pb, false))
	}
	m.checkDrift(d, u, significant, lo, hi, sh, s)

	// The shape (centre, extent, separable profiles) is recomputed on the
	// unit's turn or when its significance changed, else kept. A unit whose
	// Gaussian fits keep failing (a field no Gaussian describes, a noisy
	// one) tries again only on every 2nd, 4th, then 8th turn, its moments
	// shown in between: a failed fit runs all its steps, the costliest
	// per-unit work of an update.
	fit := &m.fits[u]
	keep := fit.ok && !m.refit[u] && fit.significant == significant
	gauss := significant && m.refit[u]
	if gauss {
		fit.turns++
		gauss = fit.turns%fitRetryEvery(fit.misses) == 0
	}
	s.features.MomentsOnly = !gauss
	s.features.KeepShape = keep
	s.features.Warm = nil
	if fit.ok && fit.gauss {
		s.features.Warm = &Features{CentreX: fit.cx, CentreY: fit.cy, SigmaX: fit.sx, SigmaY: fit.sy, Angle: fit.angle}
	}
	s.features.energy = s.energy
	_ = s.features.FeaturesTo(&d.Features, s.w)
	s.features.energy = nil
	if keep {
		fit.restore(&d.Features)
	} else {
		misses := 0
		switch {
		case gauss && !s.features.Fitted:
			misses = fit.misses + 1
		case !gauss && significant:
			misses = fit.misses // skipped: the count stands
		}
		fit.save(&d.Features, significant, s.features.Fitted, misses)
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
	s.w, s.sta = nil, nil // the snapshot's now, not to be written again
	return d
}

// reliabilityLags is the width of the lag window of the drift check: the
// main lobe of a field, without the many lags that hold only noise.
const reliabilityLags = 3

// reliabilityWindow returns the coefficient range [lo, hi) of the lag window
// of the drift check: centred on the unit's own peak lag (the lag of the
// largest of the weights' lag energies, energy) once the unit is
// significant (its field then decides the lag, not its noise), before
// that on the population's median peak lag, so that under the null the
// window does not depend on the unit's own data and r stays unbiased.
func (m *Mapper) reliabilityWindow(energy []float64, significant bool) (lo, hi int) {
	centre := m.popPeak
	if significant {
		best := -1.0
		for l, e := range energy[:m.cfg.Lags] {
			if e > best {
				centre, best = l, e
			}
		}
	}
	n := min(reliabilityLags, m.cfg.Lags)
	first := min(max(centre-n/2, 0), m.cfg.Lags-n)
	return first * m.pixels, (first + n) * m.pixels
}

// fitCycle and fitMin spread the shape features (the Gaussian fit, the
// moments, the space–time decomposition), the costliest per-unit steps,
// over updates: each update recomputes them for the next ⌈units/fitCycle⌉
// units (at least fitMin) in turn, with the Gaussian fit for the
// significant ones, so every unit is refreshed every fitCycle updates or
// more often and the cost per update stays bounded whatever the number of
// units. In between a unit keeps its last shape unless its significance
// changed (a newly significant unit shows its moments until its turn). The
// turn depends on the update count only, so replays give the same features.
const (
	fitCycle = 16
	fitMin   = 4
)

// planRefits marks the units whose turn to be refitted it is.
func (m *Mapper) planRefits(n int) {
	m.refit = slices.Grow(m.refit[:0], n)[:n]
	clear(m.refit)
	if n == 0 {
		return
	}
	k := min(n, max(fitMin, (n+fitCycle-1)/fitCycle))
	if m.cfg.PriorInline == PriorInlineAll {
		k = n // an export's single update: every unit's shape is fitted
	}
	for i := range k {
		m.refit[(m.fitTurn+i)%n] = true
	}
	m.fitTurn = (m.fitTurn + k) % n
}

// shapeFit is a unit's last shape (Gaussian fit or moments) and separable
// approximation, shown until the next refresh; significant tells whether
// the unit was significant then, gauss whether the shape is a Gaussian fit
// (which a later fit starts from). turns counts the unit's refresh turns
// while significant, misses its Gaussian fits that failed in a row.
// Spatial and Temporal are shared with earlier snapshots, which never
// write them.
type shapeFit struct {
	ok, significant, gauss                    bool
	turns, misses                             int
	cx, cy, sx, sy, angle, cxd, cyd, sxd, syd Float
	separability                              Float
	spatial, temporal                         Floats
}

func (f *shapeFit) save(ft *Features, significant, gauss bool, misses int) {
	*f = shapeFit{true, significant, gauss, f.turns, misses, ft.CentreX, ft.CentreY, ft.SigmaX, ft.SigmaY, ft.Angle,
		ft.CentreXDeg, ft.CentreYDeg, ft.SigmaXDeg, ft.SigmaYDeg,
		ft.Separability, ft.Spatial, ft.Temporal}
}

// fitRetryEvery is how many refresh turns apart a unit with misses failed
// Gaussian fits in a row tries again: every turn, then every 2nd, 4th and
// at most every 8th.
func fitRetryEvery(misses int) int {
	return 1 << min(misses, 3)
}

func (f *shapeFit) restore(ft *Features) {
	ft.CentreX, ft.CentreY, ft.SigmaX, ft.SigmaY, ft.Angle = f.cx, f.cy, f.sx, f.sy, f.angle
	ft.CentreXDeg, ft.CentreYDeg, ft.SigmaXDeg, ft.SigmaYDeg = f.cxd, f.cyd, f.sxd, f.syd
	ft.Separability, ft.Spatial, ft.Temporal = f.separability, f.spatial, f.temporal
}

// halvesTo writes the two split-half ridge estimates of unit u and returns
// the sum of each (added in index order, for splitHalfSums). With y_A the
// counts in half A, the ridge fit of y_A over all bins is w_A; removing
// ȳ_A times the fit w_h of the half indicator h leaves the fit of half A's
// counts centred within half A, and likewise for half B (whose indicator
// 1 − h has fit −w_h, since the intercept absorbs constants). Under the null
// the two depend on disjoint, independent bins. w_A is read from the ridge
// value by value, as WeightsTo forms it.
func (m *Mapper) halvesTo(a, b, w, wh []float64, u int) (sumA, sumB float64) {
	if m.ridge.Rows() == 0 { // w_A, w and w_h are all zero
		clear(a)
		clear(b)
		return 0, 0
	}
	meanA, meanB := 0.0, 0.0
	if m.usedA > 0 {
		meanA = m.spikesA[u] / float64(m.usedA)
	}
	if nb := m.used - m.usedA; nb > 0 {
		meanB = (m.spikes[u] - m.spikesA[u]) / float64(nb)
	}
	raw, pe, f := m.ridge.weightsRow(m.colA(u))
	n := len(a)
	b, w, wh, raw, pe = b[:n], w[:n], wh[:n], raw[:n], pe[:n]
	for i := range a {
		wa := raw[i] + f*pe[i]
		ai := wa - meanA*wh[i]
		bi := w[i] - wa + meanB*wh[i]
		a[i], b[i] = ai, bi
		sumA += ai
		sumB += bi
	}
	return sumA, sumB
}

// weightsRow returns what WeightsTo(dst, col) forms its weights from:
// dst[i] = w[i] + f·pe[i] for i < Dim(). col must be in range.
func (r *Ridge) weightsRow(col int) (w, pe []float64, f float64) {
	c, pe := r.interceptCorrection()
	w = r.wt[col*r.ld : col*r.ld+r.n]
	return w, pe, c * w[r.dim]
}

// weightsEnergiesTo writes the ridge weights of column col to w, as
// WeightsTo does, and in the same pass each lag's Σ w² into energy and
// Σ w² over all of w (returned after the intercept), all added in index
// order (the total as dot(w, w) adds it). The ridge must have rows and col
// must be in range.
func (m *Mapper) weightsEnergiesTo(w, energy []float64, col int) (intercept, total float64) {
	raw, pe, f := m.ridge.weightsRow(col)
	P := m.pixels
	for l := range energy {
		var e float64
		wl, rl, pl := w[l*P:(l+1)*P], raw[l*P:(l+1)*P], pe[l*P:(l+1)*P]
		for i := range wl {
			v := rl[i] + f*pl[i]
			wl[i] = v
			v2 := v * v
			e += v2
			total += v2
		}
		energy[l] = e
	}
	d := m.ridge.dim
	return raw[d] + f*pe[d], total
}

// staFromCross writes the STA, cross/spikes (zeros without spikes), as
// STA.STATo does, from the cross-correlation already at hand.
func staFromCross(sta, cross []float64, spikes float64) {
	if spikes == 0 {
		clear(sta)
		return
	}
	inv := 1 / spikes
	for i, v := range cross {
		sta[i] = v * inv
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
// (within the cap) and attaches the latest results to the details. A unit the experimenter asked for comes
// first: it takes a free place, or the place of an automatic ("no field")
// unit, whose STC is dropped. STC needs a white stimulus, whose prior
// covariance c²I is known. Each detail's STCState says what became of it.
func (m *Mapper) updateSTC(details []*UnitDetail) {
	if !m.cfg.White {
		for u, d := range details {
			if m.flagged[u] {
				d.STCState = "unavailable: STC needs a white-noise stimulus"
			}
		}
		return
	}
	if m.stcLags == nil {
		m.stcLags = m.stcWindow(details)
	}
	refused := map[int]string{}
	for u := range details {
		if !m.flagged[u] || m.stc[u] != nil {
			continue
		}
		if len(m.stc) >= m.cfg.STCMaxUnits && !m.dropAutomaticSTC() {
			refused[u] = fmt.Sprintf("waiting: all %d STC places hold requested units", m.cfg.STCMaxUnits)
			continue
		}
		s, err := NewSTC(m.pixels, m.stcLags)
		if err != nil {
			refused[u] = "waiting: " + err.Error()
			continue
		}
		m.stc[u] = s
	}
	for u, d := range details {
		if m.stc[u] != nil || len(m.stc) >= m.cfg.STCMaxUnits || d.Status != NoField {
			continue
		}
		if s, err := NewSTC(m.pixels, m.stcLags); err == nil {
			m.stc[u] = s
		}
	}
	for u, d := range details {
		acc := m.stc[u]
		switch r := m.stcResults[u]; {
		case acc != nil && r != nil:
			d.STC = r
			d.HasSTC = true
			d.STCState = "running"
		case acc != nil && acc.Effective() < stcMinSamples*float64(acc.Dim()):
			d.STCState = fmt.Sprintf("collecting: %.0f of %d spike-triggered samples", acc.Effective(), stcMinSamples*acc.Dim())
		case acc != nil:
			d.STCState = "queued for results"
		default:
			d.STCState = refused[u]
		}
	}
}

// refreshSTC recomputes, every stcEvery updates, one STC unit's result in
// turn, in the background while the per-unit statistics run; the function
// it returns waits for it and stores the result (nil when there is nothing
// to refresh).
func (m *Mapper) refreshSTC() func() {
	if !m.cfg.White || len(m.stc) == 0 || m.updates%stcEvery != 0 {
		return nil
	}
	units := make([]int, 0, len(m.stc))
	for u := range m.stc {
		units = append(units, u)
	}
	slices.Sort(units)
	u := units[m.stcTurn%len(units)]
	m.stcTurn++
	acc := m.stc[u]
	// The null bound needs many more samples than dimensions.
	if acc.Effective() < stcMinSamples*float64(acc.Dim()) {
		return nil
	}
	var res STCResult
	var err error
	done := make(chan struct{})
	go func() {
		defer close(done)
		res, err = acc.Result(m.cfg.PixelVariance, math.NaN(), math.NaN())
	}()
	return func() {
		<-done
		if err == nil {
			res.Spikes = int64(acc.Spikes())
			m.stcResults[u] = &res
		}
	}
}

// dropAutomaticSTC ends the STC of one unit that was not asked for (the
// one with the highest index, the latest to appear), to make room for a
// request; it reports false when every place holds a request.
func (m *Mapper) dropAutomaticSTC() bool {
	drop := -1
	for u := range m.stc {
		if !m.flagged[u] && u > drop {
			drop = u
		}
	}
	if drop < 0 {
		return false
	}
	delete(m.stc, drop)
	delete(m.stcResults, drop)
	return true
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
