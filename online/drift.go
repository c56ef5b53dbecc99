package online

import "math"

// Drift. An electrode that drifts moves a field within a block, and the
// block's estimate then blurs two positions. At each of a significant
// unit's looks (sequential.go: at 25·2^(j−1) spikes, the count doubling each
// time) its field from the spikes before the previous look (the first half
// of its spikes) is compared with the field from the spikes since (the
// second half), over the reliability window's lags.
//
// The test. With Σ_e and Σ_l the raw sums Σ y_k x_k over the two segments
// and N_e, N_l their spikes, T = Σ_e/N_e − Σ_l/N_l is the difference of the
// two STAs (the mean stimulus cancels). If the field does not change it has
// mean zero, and on white noise of pixel variance c², conditional on the
// spike trains, covariance c²·Toeplitz(S_e/N_e² + S_l/N_l²) over the lags of
// each pixel, S_e and S_l the segments' raw count lag products Σ y_k y_{k+d}
// (raw, not centred: T is not centred within the segments, and the frames
// are independent with variance c² whatever their mean; the white test's
// derivation with weights ±1/N on the bins; pairs straddling the boundary
// are dropped, and a field adds terms of second order in its strength). WhiteTest turns T and
// that autocovariance into a χ²_{P·W} statistic, W the window's lags. The
// look's p-value is compared with the look's level α_j, so over the block
// the share of still units ever flagged stays at most α. A flagged unit
// stays flagged, and reports the centres of the two segments' fields.
//
// On a correlated stimulus the difference is whitened by the ridge's M over
// all D coefficients and its null moments follow the posterior test's
// (movieDriftP).

// driftState is one unit's drift check: the sums at its last look.
type driftState struct {
	look    int
	sxy     []float64 // Σ y x (raw) at the last look
	lagSums []float64 // count lag products S_0…S_K at the last look
	spikes  float64
	sx      []float64 // Σ x over the used bins at the last look (correlated stimuli)
	bins    int64
	// Result, kept once flagged.
	flagged  bool
	p        float64
	from, to [2]float64
}

// checkDrift runs unit u's drift check when a look is due and fills the
// drift fields of d. lo, hi is the reliability window (coefficients).
func (m *Mapper) checkDrift(d *UnitDetail, u int, significant bool, lo, hi int, sh *ridgeCommon, s *scratch) {
	nan := Float(math.NaN())
	d.DriftP = nan
	d.DriftFrom = [2]Float{nan, nan}
	d.DriftTo = [2]Float{nan, nan}
	if !m.cfg.White && (sh == nil || sh.lag == nil || !(sh.t1 > 0)) {
		return
	}
	st := &m.cal.drift[u]
	if st.p > 0 {
		d.DriftP = Float(st.p)
	}
	if st.flagged {
		d.Drift = true
		d.DriftFrom = [2]Float{Float(st.from[0]), Float(st.from[1])}
		d.DriftTo = [2]Float{Float(st.to[0]), Float(st.to[1])}
		return
	}
	spikes := m.spikes[u]
	j := LookIndex(spikes)
	if j <= st.look {
		return
	}
	sxy := s.cross // scratch: raw Σ y x now
	a, b := m.sta.block(u, staA), m.sta.block(u, staB)
	for i := range sxy {
		sxy[i] = a[i] + b[i]
	}
	lagSums := m.cal.counts.sums[u]
	if significant && st.sxy != nil && st.spikes > 0 && spikes-st.spikes > 0 {
		ne, nl := st.spikes, spikes-st.spikes
		// Lag weights of the difference: w(d) = S_e(d)/N_e² + S_l(d)/N_l².
		w := make([]float64, len(lagSums))
		for dd := range w {
			w[dd] = st.lagSums[dd]/(ne*ne) + (lagSums[dd]-st.lagSums[dd])/(nl*nl)
		}
		diff := s.wa // scratch
		for i := range diff {
			diff[i] = st.sxy[i]/ne - (sxy[i]-st.sxy[i])/nl
		}
		var p float64
		ok := false
		if m.cfg.White {
			W := (hi - lo) / m.pixels
			wt := NewWhiteTest(m.pixels, W)
			if res, err := wt.TestTo(nil, diff[lo:hi], w[:W], m.cfg.PixelVariance); err == nil {
				p, ok = res.P, true
			}
		} else {
			p, ok = m.movieDriftP(diff, u, st, sh)
		}
		if ok {
			st.p = p
			d.DriftP = Float(p)
			if p < LookLevel(m.cfg.Alpha, j) {
				st.flagged = true
				st.from = m.segmentCentre(st.sxy, ne, s)
				for i := range diff {
					diff[i] = sxy[i] - st.sxy[i]
				}
				st.to = m.segmentCentre(diff, nl, s)
				d.Drift = true
				d.DriftFrom = [2]Float{Float(st.from[0]), Float(st.from[1])}
				d.DriftTo = [2]Float{Float(st.to[0]), Float(st.to[1])}
			}
		}
	}
	// Move the segment boundary to this look.
	st.look = j
	if st.sxy == nil {
		st.sxy = make([]float64, m.dim)
	}
	copy(st.sxy, sxy)
	st.lagSums = append(st.lagSums[:0], lagSums...)
	st.spikes = spikes
	if !m.cfg.White {
		if st.sx == nil {
			st.sx = make([]float64, m.dim)
		}
		m.sta.sumXTo(st.sx)
		st.bins = m.used
	}
}

// sumXTo writes Σ x over all bins (both halves) into dst.
func (s *STA) sumXTo(dst []float64) {
	s.Flush() // the folds add the stimulus sums
	for i := range dst {
		dst[i] = s.sumX[0][i] + s.sumX[1][i]
	}
}

// movieDriftP is the drift p-value on a correlated stimulus. Each
// segment's STA is centred on its own mean stimulus, so a slowly varying
// movie does not pass for a moving field: diff = (Σ_e y x/N_e − x̄_e) −
// (Σ_l y x/N_l − x̄_l) (diff holds the uncentred part on entry). Whitened by
// the ridge's M = (X̃ᵀX̃ + λI)⁻¹, Q = n·diffᵀM·diff/w(0) with
// w(d) = A_e(d)/N_e² + A_l(d)/N_l² from the segments' centred count
// autocovariances. Conditional on the spike trains its null mean and
// variance are those of the posterior test's numerator, t1 and 2t2, times
// the correction of the lag weights w (spikeCorrelation), and it is
// compared with the matching scaled chi-square (Satterthwaite 1946); the
// count variance is known here, so no F reference is needed.
func (m *Mapper) movieDriftP(diff []float64, u int, st *driftState, sh *ridgeCommon) (float64, bool) {
	ne, nl := st.spikes, m.spikes[u]-st.spikes
	be, bl := float64(st.bins), float64(m.used-st.bins)
	if !(be > 0) || !(bl > 0) {
		return 0, false
	}
	sx := make([]float64, len(diff))
	m.sta.sumXTo(sx)
	for i := range diff {
		diff[i] -= st.sx[i]/be - (sx[i]-st.sx[i])/bl
	}
	lagSums := m.cal.counts.sums[u]
	w := make([]float64, len(lagSums))
	ye, yl := ne/be, nl/bl
	for d := range w {
		ae := st.lagSums[d] - (be-float64(d))*ye*ye
		al := lagSums[d] - st.lagSums[d] - (bl-float64(d))*yl*yl
		w[d] = ae/(ne*ne) + al/(nl*nl)
	}
	if !(w[0] > 0) {
		return 0, false
	}
	v := make([]float64, len(diff))
	m.ridge.weightsMulTo(v, diff)
	q := dot(diff, v) * float64(m.used) / w[0]
	corr := spikeCorrelation(w, sh.lag.rho, m.cfg.Lags, sh.lag.h, sh.lag.tau, sh.lag.vecs)
	mean := corr.Mean * sh.t1
	g := corr.Var * sh.t2 / mean
	nu := mean * mean / (corr.Var * sh.t2)
	p, _ := ChiSquareTail(q/g, nu)
	return p, !math.IsNaN(p)
}

// segmentCentre is the Gaussian-fit centre of a segment's field from its
// raw sums Σ y x over n spikes: the fit to its STA (mean stimulus removed).
// On a correlated stimulus the STA is the field blurred by the stimulus's
// covariance, which for a stationary, symmetric covariance keeps the centre;
// whitening it would only add noise.
func (m *Mapper) segmentCentre(sxy []float64, n float64, s *scratch) [2]float64 {
	est := make([]float64, len(sxy))
	m.sta.meanTo(est, 0, 1)
	for i := range est {
		est[i] = sxy[i]/n - est[i]
	}
	var f Features
	s.features.MomentsOnly = false
	s.features.KeepShape = false
	s.features.Warm = nil
	if err := s.features.FeaturesTo(&f, est); err != nil {
		return [2]float64{math.NaN(), math.NaN()}
	}
	return [2]float64{float64(f.CentreX), float64(f.CentreY)}
}
