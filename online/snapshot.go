package online

import "math"

// Features summarise one unit's estimated field.
type Features struct {
	PeakLag   int   `json:"peak_lag"`   // lag index (0 = frame on screen during the bin) with the largest energy
	LatencyMS Float `json:"latency_ms"` // PeakLag times the frame period, in milliseconds
	// Map is the spatial map at the peak lag, row-major height×width.
	Map Floats `json:"map"`
	// Centre and extent from the Gaussian fit to Polarity·Map (pixels;
	// column x, row y).
	CentreX Float `json:"centre_x"`
	CentreY Float `json:"centre_y"`
	SigmaX  Float `json:"sigma_x"` // along the fitted major axis
	SigmaY  Float `json:"sigma_y"` // along the fitted minor axis
	Angle   Float `json:"angle"`   // radians, of the major axis from the x (column) axis
	// The same in degrees of visual angle, when the screen geometry is known.
	CentreXDeg Float `json:"centre_x_deg"`
	CentreYDeg Float `json:"centre_y_deg"`
	SigmaXDeg  Float `json:"sigma_x_deg"`
	SigmaYDeg  Float `json:"sigma_y_deg"`
	// Polarity is +1 for a bright-preferring peak, −1 for dark-preferring.
	Polarity int `json:"polarity"`
	// Separability is σ₁²/Σσᵢ² of the space×time matrix.
	Separability Float `json:"separability"`
	// Spatial (height×width) and Temporal (lags) profiles of the separable
	// approximation σ₁u₁v₁ᵀ, scaled so Spatial⊗Temporal reproduces it.
	Spatial  Floats `json:"spatial"`
	Temporal Floats `json:"temporal"`
}

// STCResult is the spike-triggered covariance analysis of one unit in the
// reduced space (the spatial frame at a few lags).
type STCResult struct {
	Lags        []int  `json:"lags"`        // the lags of the reduced space
	Eigenvalues Floats `json:"eigenvalues"` // descending
	// NullLow and NullHigh bound the eigenvalues expected without any
	// stimulus dependence; eigenvalues outside are significant.
	NullLow  Float `json:"null_low"`
	NullHigh Float `json:"null_high"`
	// Filters are the significant eigenvectors (each len(Lags)·height·width,
	// lag-major), most excitatory first, then suppressive.
	Filters     []Floats `json:"filters"`
	Significant []Float  `json:"significant_eigenvalues"`
	Spikes      int64    `json:"spikes"`
}

// UnitSummary is the per-second summary of one unit.
type UnitSummary struct {
	ID     string `json:"id"`
	Spikes int64  `json:"spikes"` // spikes of this unit in used bins of the block
	Status Status `json:"status"`
	// Reliability is the Spearman–Brown corrected split-half correlation.
	Reliability Float `json:"reliability"`
	// PredictiveR is the cross-validated correlation between each half's
	// spike counts and the prediction of the field estimated from the other
	// half (mean of both directions; about 0 without a field). See predict.go.
	PredictiveR Float `json:"predictive_r"`
	// Significance is −log10 of the p-value of the field against the null.
	Significance Float `json:"significance"`
	PValue       Float `json:"p_value"`
	// ETA is the projected seconds until Reliability reaches the target;
	// null while it is too early to project, 0 once reached.
	ETA Float `json:"eta_s"`
	// SignificantAtSpikes is the spike count at the look that found the
	// field significant (α spent over the block's looks); 0 before.
	SignificantAtSpikes int64 `json:"significant_at_spikes"`
	// NoFieldSpikes is the spike count from which a unit without a
	// significant field is called "no field": where the smallest field
	// (Config.SmallestField) would have been detected with 90 % probability.
	// Null for significant units.
	NoFieldSpikes Float `json:"no_field_spikes"`
	// Drift is set once the unit's field differs between the first and the
	// second half of its spikes (see drift.go);
	// DriftP is the p-value of the last comparison, DriftFrom and DriftTo
	// the centres (x, y in pixels) of the two halves' fields when flagged.
	Drift     bool     `json:"drift"`
	DriftP    Float    `json:"drift_p"`
	DriftFrom [2]Float `json:"drift_from"`
	DriftTo   [2]Float `json:"drift_to"`
	Rate      Float    `json:"rate_hz"`
	PeakLag   int      `json:"peak_lag"`
	LatencyMS Float    `json:"latency_ms"`
	CentreX   Float    `json:"centre_x"`
	CentreY   Float    `json:"centre_y"`
	SigmaX    Float    `json:"sigma_x"`
	SigmaY    Float    `json:"sigma_y"`
	Polarity  int      `json:"polarity"`
	Map       Floats   `json:"map"` // spatial map at the peak lag (ridge estimate), height×width
	HasSTC    bool     `json:"has_stc"`
	Flagged   bool     `json:"flagged"`
	// Estimate names the estimate the status, and for an emerging unit
	// the ETA, come from: "ridge" or "prior" (the smooth-local estimate,
	// when its split-half reliability is the higher); empty for units
	// that are not significant.
	Estimate string `json:"estimate,omitempty"`
	// PriorReliability is the reliability of the smooth-local estimate
	// (prior_live.go: the Spearman–Brown corrected split-half correlation,
	// each half fitted on its own data, times the window's share); null
	// without a fit. With Estimate "prior" it is the one the status uses.
	PriorReliability Float `json:"prior_reliability"`
}

// UnitDetail is everything known about one unit.
type UnitDetail struct {
	UnitSummary
	Shape       [3]int `json:"shape"` // lags, height, width
	FramePeriod Float  `json:"frame_period_s"`
	STA         Floats `json:"sta"`   // flattened row-major (lag, row, column)
	Ridge       Floats `json:"ridge"` // the exact ridge weights, same layout
	Intercept   Float  `json:"intercept"`
	// Z is each ridge weight over its sampling standard deviation under the
	// null (mean z² ≈ 1 without a field; see zscore.go). A snapshot's
	// Detail computes it when asked (from zScale and zDiag), so that the
	// updates do not keep a third array per unit.
	Z Floats `json:"z"`
	// Prior is the smooth-local estimate (posterior mean under the
	// evidence-optimised smoothness-and-locality prior), same layout as
	// Ridge, zero outside its window; null until the unit's first fit.
	Prior      Floats       `json:"prior"`
	PriorHyper *SmoothLocal `json:"prior_hyper"` // its hyperparameters; null without a fit
	// PriorWindow is the box of coefficients the fit covers; absent
	// without a fit.
	PriorWindow *PriorWindow `json:"prior_window,omitempty"`
	// PriorLogEvidence is the log evidence at PriorHyper, PriorBins the
	// used bins behind the fit (it trails the ridge by a few seconds).
	PriorLogEvidence Float `json:"prior_log_evidence"`
	PriorBins        int64 `json:"prior_bins"`
	// PriorETA is the prior's projected seconds to the target (null when
	// too early).
	PriorETA Float      `json:"prior_eta_s"`
	Features Features   `json:"features"`
	STC      *STCResult `json:"stc,omitempty"`
	// STCState says what became of STC on this unit: "running" (a result
	// is attached), "collecting: …" (too few spike-triggered samples yet),
	// "queued for results" (enough; its turn comes), "waiting: …" (asked
	// for, not started, and why) or "unavailable: …"; empty when STC was
	// neither asked for nor started.
	STCState string `json:"stc_state,omitempty"`
	// History of reliability over the block, one point per update.
	History []HistoryPoint `json:"history"`

	// The z scores' ingredients: σ² times the spike-train correction, and
	// the update's sampling variance of each weight (shared by its units).
	zScale float64
	zDiag  []float64
}

// HistoryPoint is one past value of a unit's reliability.
type HistoryPoint struct {
	T           Float `json:"t"` // seconds since block start
	Spikes      int64 `json:"spikes"`
	Reliability Float `json:"reliability"`
}

// BlockSummary tells the experimenter whether the block can stop and where
// the next stimulus should go.
type BlockSummary struct {
	Units       int `json:"units"`
	Significant int `json:"significant"`
	Reliable    int `json:"reliable"`
	// Drifting counts the significant units whose field moved within the
	// block (UnitSummary.Drift).
	Drifting int   `json:"drifting"`
	Target   Float `json:"target"`   // target reliability
	Fraction Float `json:"fraction"` // fraction of significant units that must be reliable
	// ETA is the projected seconds until Fraction of the significant units
	// reach the target (null when too early, 0 when reached).
	ETA   Float `json:"eta_s"`
	Ready bool  `json:"ready"` // the block criterion holds now
	// Population of the reliable units' centres (pixels).
	CentreX Float `json:"centre_x"`
	CentreY Float `json:"centre_y"`
	SpreadX Float `json:"spread_x"`
	SpreadY Float `json:"spread_y"`
	// Suggested stimulus centre and aperture (a square side in pixels)
	// covering ApertureFraction of the reliable units' fields.
	SuggestX         Float `json:"suggest_x"`
	SuggestY         Float `json:"suggest_y"`
	Aperture         Float `json:"aperture"`
	ApertureFraction Float `json:"aperture_fraction"`
	ApertureDeg      Float `json:"aperture_deg"`
}

// Snapshot is an immutable picture of a mapper after one update. It is safe
// to share between goroutines.
type Snapshot struct {
	Block       string        `json:"block"`
	T           Float         `json:"t"` // seconds of data in the block (used bins × frame period)
	Bins        int64         `json:"bins"`
	Shape       [3]int        `json:"shape"`
	FramePeriod Float         `json:"frame_period_s"`
	Lambda      Float         `json:"lambda"`
	Solve       SolveInfo     `json:"solve"` // how this update folded its bins into the ridge
	Summary     BlockSummary  `json:"summary"`
	Units       []UnitSummary `json:"units"`
	details     map[string]*UnitDetail
}

// Detail returns the full estimate of one unit, if the unit is known.
func (s *Snapshot) Detail(id string) (*UnitDetail, bool) {
	if s == nil {
		return nil, false
	}
	d, ok := s.details[id]
	if ok && d.Z == nil && d.zDiag != nil {
		c := *d // the snapshot's own stays as it is: concurrent reads
		c.Z = zScores(d.Ridge, d.zScale, d.zDiag)
		return &c, true
	}
	return d, ok
}

// zScores is w_i / √(scale·diag_i), 0 where that is not finite.
func zScores(w Floats, scale float64, diag []float64) Floats {
	z := make(Floats, len(w))
	for i, v := range w {
		x := float64(v) / math.Sqrt(scale*diag[i])
		if math.IsNaN(x) || math.IsInf(x, 0) {
			x = 0
		}
		z[i] = Float(x)
	}
	return z
}
