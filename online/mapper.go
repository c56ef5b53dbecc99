package online

import "errors"

// Config describes the estimation for one mapping block.
type Config struct {
	Width, Height int     // stimulus frame size in pixels
	Lags          int     // lags kept per bin (default 12)
	FramePeriod   float64 // seconds per frame (default 1/60)
	// Lambda is the ridge penalty; 0 picks the default (DefaultLambdaPerVariance
	// times the pixel variance, or 100 when that is unknown).
	Lambda float64
	// Forget is the RLS forgetting factor in (0, 1]; 1 (the default) keeps the
	// exact ridge solution over all bins.
	Forget float64
	// White marks a stimulus with independent pixels and frames (the noise
	// types); it enables the STA test against the white-noise null.
	White bool
	// PixelVariance is the known per-pixel variance of a white stimulus.
	PixelVariance float64
	Target        float64   // target reliability (default 0.9)
	Fraction      float64   // fraction of significant units for the block criterion (default 0.8)
	ChunkSeconds  float64   // length of the alternating split-half chunks (default 5 s)
	Alpha         float64   // significance level (default 0.001)
	MinSpikes     int64     // spikes before a unit can be called "no field" (default 300)
	STCMaxUnits   int       // at most this many units get STC (default 16)
	Geometry      *Geometry // optional, for degrees of visual angle
}

// Count is the number of spikes of one unit (by index) in one bin.
type Count struct {
	Unit int
	N    float64
}

// ErrConfig is returned for an unusable configuration.
var ErrConfig = errors.New("online: bad config")

// Mapper keeps every unit's running estimates for one block. It is not safe
// for concurrent use: one goroutine (the ingest loop) calls AddBin and Update;
// the Snapshots it returns are immutable and may be shared freely.
type Mapper struct {
	cfg   Config
	ids   []string
	index map[string]int
	snap  *Snapshot
}

// NewMapper checks cfg, fills in defaults and returns an empty mapper.
func NewMapper(cfg Config) (*Mapper, error) {
	if cfg.Width <= 0 || cfg.Height <= 0 {
		return nil, ErrConfig
	}
	return &Mapper{cfg: cfg, index: map[string]int{}}, nil
}

// Config returns the configuration in force, defaults filled in.
func (m *Mapper) Config() Config { return m.cfg }

// Unit returns the index of the unit with this id, registering it when new.
// A new unit's counts are zero in every bin before it appeared.
func (m *Mapper) Unit(id string) int {
	if i, ok := m.index[id]; ok {
		return i
	}
	m.index[id] = len(m.ids)
	m.ids = append(m.ids, id)
	return len(m.ids) - 1
}

// UnitID is the id of unit index i.
func (m *Mapper) UnitID(i int) string { return m.ids[i] }

// Units is the number of units registered.
func (m *Mapper) Units() int { return len(m.ids) }

// AddBin adds one bin: frame is the stimulus frame on screen during the bin
// (row-major, width×height); counts are the spikes per unit index in the bin.
// It does not allocate in steady state.
func (m *Mapper) AddBin(frame []float64, counts []Count) {}

// Update folds the bins added since the last call into the estimates,
// recomputes every unit's statistics and returns a new Snapshot.
func (m *Mapper) Update() *Snapshot { return &Snapshot{} }

// Reset forgets all estimates (the electrode moved); units stay registered.
func (m *Mapper) Reset() {}

// FlagSTC asks for (or stops) spike-triggered covariance on one unit.
func (m *Mapper) FlagSTC(id string, on bool) {}

// SetCriterion changes the target reliability and the block fraction.
func (m *Mapper) SetCriterion(target, fraction float64) {}
