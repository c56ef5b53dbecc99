package synth

import (
	"encoding/json"
	"fmt"
	"io"
)

// Truth is the ground truth of one unit. Positions are in stimulus pixels
// with column x and row y (pixel centres at integers); filters are
// lag-major [lag][row][col] with unit Euclidean norm.
type Truth struct {
	ID        string  `json:"id"` // "chCC.N": channel and unit on it
	Kind      string  `json:"kind"`
	Channel   int     `json:"channel"`
	DepthUM   float64 `json:"depth_um"`   // Channel × ContactPitchUM
	AppearsAt float64 `json:"appears_at"` // acquisition time of its first possible spike, s
	RateHz    float64 `json:"rate_hz"`    // mean rate under white noise (model)
	Shape     [3]int  `json:"shape"`      // lags, height, width
	// Filter is the linear filter (nil for complex and none).
	Filter []float64 `json:"filter,omitempty"`
	// Pair is the quadrature pair of a complex cell (nil otherwise).
	Pair     [][]float64 `json:"pair,omitempty"`
	CentreX  float64     `json:"centre_x"`
	CentreY  float64     `json:"centre_y"`
	SigmaX   float64     `json:"sigma_x"` // Gabor envelope σ across the bars, or DoG centre σ
	SigmaY   float64     `json:"sigma_y"` // Gabor envelope σ along the bars, or DoG centre σ
	Surround float64     `json:"surround_sigma,omitempty"`
	// Orientation of the carrier (radians from the x axis: the direction
	// across the bars) of Gabor-based units.
	Orientation float64 `json:"orientation"`
	// Polarity is +1 (bright-preferring / on centre), −1 (dark / off
	// centre), 0 for complex and none.
	Polarity  int     `json:"polarity"`
	LatencyMS float64 `json:"latency_ms"` // model latency of the temporal lobe
	PeakLag   int     `json:"peak_lag"`   // lag of the largest temporal weight
	// Direction-selective unit: preferred drift direction and temporal
	// frequency of its space–time field.
	DirectionRad float64 `json:"direction,omitempty"`
	DriftHz      float64 `json:"drift_hz,omitempty"`
}

// WriteTruth writes units as JSON, {"units":[…]}, for scoring estimates.
func WriteTruth(w io.Writer, units []Truth) error {
	enc := json.NewEncoder(w)
	if err := enc.Encode(struct {
		Units []Truth `json:"units"`
	}{units}); err != nil {
		return fmt.Errorf("synth: write truth: %w", err)
	}
	return nil
}

// ReadTruth reads what WriteTruth wrote.
func ReadTruth(r io.Reader) ([]Truth, error) {
	var v struct {
		Units []Truth `json:"units"`
	}
	dec := json.NewDecoder(r)
	dec.DisallowUnknownFields()
	if err := dec.Decode(&v); err != nil {
		return nil, fmt.Errorf("synth: read truth: %w", err)
	}
	return v.Units, nil
}
