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
// On a correlated movie the STA difference is not whitened by this test;
// there the drift check is not made (Drift stays false, DriftP null).

// driftState is one unit's drift check: the sums at its last look.
type driftState struct {
	look    int
	sxy     []float64 // Σ y x (raw) at the last look
	lagSums []float64 // count lag products S_0…S_{W−1} at the last look
	spikes  float64
	bins    int64
	// Result, kept once flagged.
	flagged  bool
	p        float64
	from, to [2]float64
}

// checkDrift runs unit u's drift check when a look is due and fills the
// drift fields of d. lo, hi is the reliability window (coefficients).
func (m *Mapper) checkDrift(d *UnitDetail, u int, significant bool, lo, hi int, s *scratch) {
	nan := Float(math.NaN())
	d.DriftP = nan
	d.DriftFrom = [2]Float{nan, nan}
	d.DriftTo = [2]Float{nan, nan}
	if !m.cfg.White {
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
	W := (hi - lo) / m.pixels
	sxy := s.cross // scratch: raw Σ y x now
	a, b := m.sta.block(u, staA), m.sta.block(u, staB)
	for i := range sxy {
		sxy[i] = a[i] + b[i]
	}
	lagSums := m.cal.counts.sums[u]
	tested := significant && st.sxy != nil && st.spikes > 0 && spikes-st.spikes > 0
	if tested {
		ne, nl := st.spikes, spikes-st.spikes
		diff := s.wa // scratch
		clear(diff)
		win := diff[:hi-lo]
		for i := range win {
			win[i] = st.sxy[lo+i]/ne - (sxy[lo+i]-st.sxy[lo+i])/nl
		}
		ac := make([]float64, W)
		for dd := 0; dd < W && dd < len(st.lagSums); dd++ {
			ac[dd] = st.lagSums[dd]/(ne*ne) + (lagSums[dd]-st.lagSums[dd])/(nl*nl)
		}
		wt := NewWhiteTest(m.pixels, W)
		if res, err := wt.TestTo(nil, win, ac, m.cfg.PixelVariance); err == nil {
			st.p = res.P
			d.DriftP = Float(res.P)
			if res.P < LookLevel(m.cfg.Alpha, j) {
				st.flagged = true
				// Centres of the two segments' fields at the window's peak lag.
				est := s.ha // scratch
				for i := range est {
					est[i] = st.sxy[i] / ne
				}
				st.from = m.segmentCentre(est, s)
				for i := range est {
					est[i] = (sxy[i] - st.sxy[i]) / nl
				}
				st.to = m.segmentCentre(est, s)
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
	st.lagSums = append(st.lagSums[:0], lagSums[:min(len(lagSums), m.cfg.Lags)]...)
	st.spikes, st.bins = spikes, m.used
}

// segmentCentre is the Gaussian-fit centre of a segment's STA, given its
// raw spike-triggered mean est (the mean stimulus is removed here).
func (m *Mapper) segmentCentre(est []float64, s *scratch) [2]float64 {
	mean := make([]float64, len(est))
	m.sta.meanTo(mean, 0, 1)
	for i := range est {
		est[i] -= mean[i]
	}
	var f Features
	s.features.MomentsOnly = false
	s.features.SkipSeparable = true
	s.features.Warm = nil
	if err := s.features.FeaturesTo(&f, est); err != nil {
		return [2]float64{math.NaN(), math.NaN()}
	}
	return [2]float64{float64(f.CentreX), float64(f.CentreY)}
}
