package online

import (
	"errors"
	"fmt"
	"math"
	"runtime"
)

// Config describes the estimation for one mapping block.
type Config struct {
	Width, Height int     // stimulus frame size in pixels
	Lags          int     // lags kept per bin (default 12)
	FramePeriod   float64 // seconds per frame (default 1/60)
	// Lambda is the ridge penalty; 0 picks the default: DefaultLambda times
	// the pixel variance (or times 1 when that is unknown).
	Lambda float64
	// White marks a stimulus with independent pixels and frames (the noise
	// types); it enables the STA test against the white-noise null.
	White bool
	// PixelVariance is the known per-pixel variance of a white stimulus.
	PixelVariance float64
	Target        float64 // target reliability (default 0.9)
	Fraction      float64 // fraction of significant units for the block criterion (default 0.8)
	Aperture      float64 // fraction of reliable fields the suggested aperture covers (default 0.9)
	ChunkSeconds  float64 // length of the alternating split-half chunks (default 5 s)
	Alpha         float64 // significance level (default 0.001)
	MinSpikes     int64   // spikes before a unit can be called "no field" (default 300)
	// SmallestField is the variance of the linear drive of the smallest field
	// the "no field" rule must be able to see (default DefaultSmallestField).
	SmallestField float64
	STCMaxUnits   int       // at most this many units get STC (default 16)
	STCLags       int       // lags in STC's reduced space (default: up to 3, keeping pixels·lags ≤ 320)
	Geometry      *Geometry // optional, for degrees of visual angle
	// Prior sizes the smooth-local fits (zero fields: the window of
	// PriorOptions, 20 evaluations for a unit's first fit and 6 for each
	// refit).
	Prior PriorOptions
	// PriorInline > 0 runs that many units' smooth-local fits inside each
	// Update instead of on a background worker, so that the estimates are
	// reproducible (tests, replays); PriorInlineAll fits every significant
	// unit in every Update, and refreshes every unit's shape features
	// (exports, which update once); 0 fits in the background.
	PriorInline int
	// PriorWorkers is the number of goroutines of the background prior
	// fits, each with its share of the units (default: GOMAXPROCS).
	PriorWorkers int
	// NoPrior turns the smooth-local estimate off.
	NoPrior bool
}

// stcMaxDim bounds the default STC space, pixels·lags.
const stcMaxDim = 320

// DefaultLambda is the default ridge penalty in units of the pixel variance:
// small against the Gram matrix's diagonal after a few seconds of 60 Hz noise.
const DefaultLambda = 100

// Count is the number of spikes of one unit (by index) in one bin.
type Count struct {
	Unit int
	N    float64
}

// ErrConfig is returned for an unusable configuration.
var ErrConfig = errors.New("online: bad config")

func (c Config) withDefaults() (Config, error) {
	if c.Width <= 0 || c.Height <= 0 || c.Width*c.Height > MaxPixels {
		return c, checkSizes(c.Width, c.Height, max(c.Lags, 1))
	}
	def := func(v *float64, d float64) {
		if *v == 0 {
			*v = d
		}
	}
	if c.Lags == 0 {
		c.Lags = 12
	}
	if err := checkSizes(c.Width, c.Height, c.Lags); err != nil {
		return c, err
	}
	def(&c.FramePeriod, 1.0/60)
	if c.Lambda == 0 {
		c.Lambda = DefaultLambda * lambdaScale(c.PixelVariance)
	}
	def(&c.Target, 0.9)
	def(&c.Fraction, 0.8)
	def(&c.Aperture, 0.9)
	def(&c.ChunkSeconds, 5)
	def(&c.Alpha, 0.001)
	def(&c.SmallestField, DefaultSmallestField)
	if c.MinSpikes == 0 {
		c.MinSpikes = 300
	}
	if c.Prior.Evaluations == 0 {
		c.Prior.Evaluations = priorLiveEvaluations
	}
	if c.PriorWorkers <= 0 {
		c.PriorWorkers = max(1, runtime.GOMAXPROCS(0))
	}
	if c.Prior.FirstEvaluations == 0 {
		c.Prior.FirstEvaluations = priorLiveFirst
	}
	if _, err := NewPriorFitter(c.Width, c.Height, max(c.Lags, 1), c.Prior); err != nil || c.PriorInline < PriorInlineAll {
		return c, fmt.Errorf("%w: prior options %+v, inline %d", ErrConfig, c.Prior, c.PriorInline)
	}
	if c.STCMaxUnits == 0 {
		c.STCMaxUnits = 16
	}
	if c.STCLags == 0 {
		// Each STC refresh decomposes a d×d matrix, d = pixels·lags, at
		// O(d³): keep d near 300 or below (a quarter of a second at most on
		// one core), with up to three lags for small frames.
		c.STCLags = max(1, min(3, stcMaxDim/(c.Width*c.Height)))
	}
	switch {
	case !(c.FramePeriod > 0) || math.IsInf(c.FramePeriod, 0):
		return c, fmt.Errorf("%w: frame period %g s", ErrConfig, c.FramePeriod)
	case !(c.Lambda > 0) || math.IsInf(c.Lambda, 0):
		return c, fmt.Errorf("%w: lambda %g", ErrConfig, c.Lambda)
	case c.Lambda < MinLambda*lambdaScale(c.PixelVariance):
		return c, fmt.Errorf("%w: lambda %g is below the floor %g (%g × the pixel variance)", ErrConfig, c.Lambda, MinLambda*lambdaScale(c.PixelVariance), MinLambda)
	case !(c.Target > 0 && c.Target < 1):
		return c, fmt.Errorf("%w: target reliability %g (need 0…1)", ErrConfig, c.Target)
	case !(c.Fraction > 0 && c.Fraction <= 1):
		return c, fmt.Errorf("%w: block fraction %g (need 0…1]", ErrConfig, c.Fraction)
	case !(c.Alpha > 0 && c.Alpha < 1):
		return c, fmt.Errorf("%w: alpha %g", ErrConfig, c.Alpha)
	case !(c.ChunkSeconds > 0):
		return c, fmt.Errorf("%w: chunk %g s", ErrConfig, c.ChunkSeconds)
	case c.White && !(c.PixelVariance > 0):
		return c, fmt.Errorf("%w: a white stimulus needs its pixel variance", ErrConfig)
	}
	if c.STCLags > c.Lags {
		c.STCLags = c.Lags
	}
	return c, nil
}

// Mapper keeps every unit's running estimates for one block. It is not safe
// for concurrent use: one goroutine (the ingest loop) calls AddBin, Update
// and the setters; the Snapshots that Update returns are immutable and may be
// shared freely.
//
// Ridge columns, for a white stimulus: unit u owns column u (its counts);
// its split halves come from the STA. Otherwise column 0 is the split-half
// indicator h (1 in half A), and unit u owns column 1+2u (its counts y) and
// 2+2u (its counts in half A, y·h); the half-A estimate is corrected for the
// indicator's own fit, so the two half estimates are independent under the
// null (see halvesTo).
type Mapper struct {
	cfg    Config
	pixels int
	dim    int

	ids      []string
	index    map[string]int
	flagged  map[int]bool
	received []int64 // every spike given to AddBin, used bin or not

	ring  [][]float64 // the last Lags frames; ring[head] is the newest
	head  int
	added int64 // bins added to this block, including those without full history
	x     []float64
	yrow  []float64

	used    int64 // bins with full history
	usedA   int64
	spikes  []float64 // per unit, over used bins
	spikesA []float64
	yy, yyA []float64 // per unit, Σ y² over used bins and over half A's
	binY    []float64 // per unit, the counts of the bin being added

	// Folding into the ridge: the bins since the last fold are logged for
	// the block update; the sufficient statistics carry all of them.
	log        binLog
	hist       [][]float64 // scratch for the log's history frames
	folded     int64       // used bins folded into the ridge
	solve      SolveInfo   // how the latest Update folded
	forceRoute string      // tests: always this route ("" = the cost model)

	sta      *STA
	ridge    *Ridge
	gram     *LagGram // lag cross-products, for the evidence and batch solves
	capUnits int      // units the ridge has columns for

	stc        map[int]*STC
	stcResults map[int]*STCResult
	stcLags    []int
	stcTurn    int
	updates    int64

	common  ridgeCommon // what every unit reads in an Update
	scratch []*scratch  // per worker of the per-unit statistics
	refit   []bool      // per unit: refit its features in this Update
	fitTurn int         // the next unit whose turn to be refitted it is

	history [][]HistoryPoint
	popPeak int // median peak lag of the significant units at the last update
	trends  []*Trend
	fits    []shapeFit
	cal     *calibration // calibrated statistics (calibration.go)
	prior   priorState   // the smooth-local estimate (prior_live.go)
	// priorEveryUnit (tests) fits the prior to every unit, not only the
	// significant ones.
	priorEveryUnit bool
	snap           *Snapshot
}

// trendPoints is how many recent updates the reliability trend fits.
const trendPoints = 60

// NewMapper checks cfg, fills in defaults and returns an empty mapper.
func NewMapper(cfg Config) (*Mapper, error) {
	cfg, err := cfg.withDefaults()
	if err != nil {
		return nil, err
	}
	m := &Mapper{
		cfg:     cfg,
		pixels:  cfg.Width * cfg.Height,
		index:   map[string]int{},
		flagged: map[int]bool{},
	}
	m.dim = m.pixels * cfg.Lags
	m.ring = make([][]float64, cfg.Lags)
	for i := range m.ring {
		m.ring[i] = make([]float64, m.pixels)
	}
	m.x = make([]float64, m.dim)
	m.capUnits = 8
	m.ridge, err = NewRidge(m.dim, m.columns(m.capUnits), cfg.Lambda)
	if err != nil {
		return nil, err
	}
	m.yrow = make([]float64, m.columns(m.capUnits))
	m.sta = NewSTA(m.pixels, cfg.Lags)
	if m.gram, err = NewLagGram(m.pixels, cfg.Lags); err != nil {
		return nil, err
	}
	m.stc = map[int]*STC{}
	m.stcResults = map[int]*STCResult{}
	m.popPeak = m.defaultPeak()
	m.log = binLog{pixels: m.pixels, lags: cfg.Lags}
	m.log.limit = m.logLimit()
	m.log.start(nil)
	m.snap = m.emptySnapshot()
	m.cal = newCalibration(&cfg, m.pixels)
	// The STA's count lag products (lags 0…L−1) are the first of the
	// calibration's (0…32), over the same used bins: one set is kept.
	m.sta.shareCounts(m.cal.counts)
	return m, nil
}

// Config returns the configuration in force, defaults filled in.
func (m *Mapper) Config() Config { return m.cfg }

// Unit returns the index of the unit with this id, registering it when new.
// A new unit's counts are zero in every bin before it appeared, which keeps
// its ridge estimate exact.
func (m *Mapper) Unit(id string) int {
	if i, ok := m.index[id]; ok {
		return i
	}
	i := len(m.ids)
	m.index[id] = i
	m.ids = append(m.ids, id)
	m.received = append(m.received, 0)
	m.spikes = append(m.spikes, 0)
	m.spikesA = append(m.spikesA, 0)
	m.yy = append(m.yy, 0)
	m.yyA = append(m.yyA, 0)
	m.binY = append(m.binY, 0)
	m.history = append(m.history, nil)
	m.trends = append(m.trends, NewTrend(trendPoints))
	m.fits = append(m.fits, shapeFit{})
	m.sta.Grow(len(m.ids))
	m.cal.addUnit(m.used)
	return i
}

// UnitID is the id of unit index i.
func (m *Mapper) UnitID(i int) string { return m.ids[i] }

// Units is the number of units registered.
func (m *Mapper) Units() int { return len(m.ids) }

// Bins is the number of bins added with full lag history.
func (m *Mapper) Bins() int64 { return m.used }

// Folded is the number of those bins folded into the ridge estimates: all of
// them right after Update, fewer in between. (Bins − Folded) × the frame
// period is how far the estimates trail the stream.
func (m *Mapper) Folded() int64 { return m.folded }

// Trailing is how far the estimates trail the bins added, in seconds of
// data: (Bins − Folded) × the frame period.
func (m *Mapper) Trailing() float64 { return float64(m.used-m.folded) * m.cfg.FramePeriod }

// growColumns makes room in the ridge for every registered unit (the ridge
// holds no pending rows between updates).
func (m *Mapper) growColumns() {
	if len(m.ids) <= m.capUnits {
		return
	}
	for m.capUnits < len(m.ids) {
		m.capUnits *= 2
	}
	m.ridge.SetCols(m.columns(m.capUnits))
	m.yrow = make([]float64, m.columns(m.capUnits))
}

// ErrBin is wrapped by AddBin's errors: the bin was refused whole and the
// estimates are unchanged.
var ErrBin = errors.New("online: bin refused")

// AddBin adds one bin: frame is the stimulus frame on screen during the bin
// (row-major, width×height); counts are the spikes per unit index in the bin.
// Unit indices must come from Unit. A frame of the wrong size or with a
// non-finite value, an unknown unit or a negative or non-finite count is
// refused whole with an error wrapping ErrBin. It does only cheap work: the
// sufficient statistics (STA sums, lag cross-products, per-unit Σy and Σy²,
// STC samples) and a compact log of the bin for the next Update's block
// update. It does not allocate in steady state.
func (m *Mapper) AddBin(frame []float64, counts []Count) error {
	if len(frame) != m.pixels {
		m.RestartLags()
		return fmt.Errorf("%w: frame of %d pixels, want %d", ErrBin, len(frame), m.pixels)
	}
	for i, v := range frame {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			m.RestartLags()
			return fmt.Errorf("%w: frame pixel %d is %v", ErrBin, i, v)
		}
	}
	for _, c := range counts {
		if c.Unit < 0 || c.Unit >= len(m.ids) || !(c.N >= 0) || math.IsInf(c.N, 0) {
			m.RestartLags()
			return fmt.Errorf("%w: count %v for unit index %d of %d", ErrBin, c.N, c.Unit, len(m.ids))
		}
	}
	for _, c := range counts {
		m.received[c.Unit] += int64(c.N)
	}
	m.head = (m.head + 1) % len(m.ring)
	copy(m.ring[m.head], frame)
	_ = m.gram.AddFrame(frame) // cannot fail: the frame was checked above
	m.log.addFrame(frame)
	m.cal.addFrame(frame)
	m.added++
	if m.added < int64(m.cfg.Lags) {
		return nil // not yet a full history: the bin is not used
	}
	// x is the shift of the previous bin's row unless this is the first
	// bin with a full history since the lags (re)started. The STA then
	// takes the newest frame alone; the whole lagged row x is built only
	// for a new batch of the STA and for units with an STC.
	shifted := m.added > int64(m.cfg.Lags)
	frameOnly := shifted && m.sta.canShift()
	for i := 0; frameOnly && len(m.stc) > 0 && i < len(counts); i++ {
		frameOnly = m.stc[counts[i].Unit] == nil
	}
	if !frameOnly {
		for lag := range m.cfg.Lags {
			src := m.ring[(m.head-lag+len(m.ring))%len(m.ring)]
			copy(m.x[lag*m.pixels:(lag+1)*m.pixels], src)
		}
	}
	chunk := int64(float64(m.used) * m.cfg.FramePeriod / m.cfg.ChunkSeconds)
	halfA := chunk%2 == 0
	m.used++
	if halfA {
		m.usedA++
	}
	m.growColumns()
	if frameOnly {
		m.sta.addShifted(frame, halfA, counts)
	} else {
		m.sta.addBin(m.x, halfA, counts, shifted)
	}
	m.log.addBin(halfA, counts)
	m.cal.addCounts(m.used-1, halfA, counts)
	for _, c := range counts {
		m.spikes[c.Unit] += c.N
		m.binY[c.Unit] += c.N
		if halfA {
			m.spikesA[c.Unit] += c.N
		}
		if len(m.stc) == 0 {
			continue // no map look-up per spike when no unit has an STC
		}
		if s := m.stc[c.Unit]; s != nil {
			s.AddBin(m.x, c.N)
		}
	}
	// Σy² of the bin's total per unit (a unit may come more than once).
	for _, c := range counts {
		y := m.binY[c.Unit]
		if y == 0 {
			continue
		}
		m.yy[c.Unit] += y * y
		if halfA {
			m.yyA[c.Unit] += y * y
		}
		m.binY[c.Unit] = 0
	}
	return nil
}

// Reset forgets all estimates (the electrode moved); units stay registered
// and the next bins start a fresh lag history.
func (m *Mapper) Reset() {
	m.added, m.used, m.usedA = 0, 0, 0
	for i := range m.ids {
		m.received[i], m.spikes[i], m.spikesA[i] = 0, 0, 0
		m.yy[i], m.yyA[i] = 0, 0
		m.history[i] = nil
		m.trends[i].Reset()
		m.fits[i] = shapeFit{}
	}
	m.ridge.Reset()
	m.folded, m.solve = 0, SolveInfo{}
	m.log.limit = m.logLimit()
	m.log.start(nil)
	m.sta.Reset()
	m.gram.Reset()
	m.cal.reset()
	m.stc = map[int]*STC{}
	m.stcResults = map[int]*STCResult{}
	m.stcLags = nil
	m.popPeak = m.defaultPeak()
	m.resetPrior()
	m.snap = m.emptySnapshot()
}

// FlagSTC asks for (or stops) spike-triggered covariance on one unit. STC
// accumulates from the bins that follow. Unknown ids are ignored and
// reported false.
func (m *Mapper) FlagSTC(id string, on bool) bool {
	u, ok := m.index[id]
	if !ok {
		return false
	}
	if on {
		m.flagged[u] = true
	} else {
		delete(m.flagged, u)
		delete(m.stc, u)
		delete(m.stcResults, u)
	}
	return true
}

// SetCriterion changes the target reliability and the block fraction. A
// criterion that fails Criterion.Check is refused whole with its error.
func (m *Mapper) SetCriterion(target, fraction float64) error {
	c := Criterion{Target: target, Fraction: fraction}
	if err := c.Check(); err != nil {
		return err
	}
	m.cfg.Target, m.cfg.Fraction = c.Target, c.Fraction
	return nil
}

// Snapshot is the result of the latest Update.
func (m *Mapper) Snapshot() *Snapshot { return m.snap }

func (m *Mapper) emptySnapshot() *Snapshot {
	return &Snapshot{
		Shape:       [3]int{m.cfg.Lags, m.cfg.Height, m.cfg.Width},
		FramePeriod: Float(m.cfg.FramePeriod),
		Lambda:      Float(m.cfg.Lambda),
		Summary:     BlockSummary{Target: Float(m.cfg.Target), Fraction: Float(m.cfg.Fraction), ETA: Float(math.NaN())},
		Units:       []UnitSummary{},
		details:     map[string]*UnitDetail{},
	}
}

// defaultPeak is the lag nearest 60 ms, a typical latency in visual cortex
// (common practice, no source), used until some unit has a field.
func (m *Mapper) defaultPeak() int {
	return min(int(math.Round(0.060/m.cfg.FramePeriod)), m.cfg.Lags-1)
}

// columns is the number of ridge columns for units units: the half-A
// indicator, then per unit its counts and its half-A counts, from which
// halvesTo forms the two split-half ridge fits whose sum is the unit's
// ridge (for every stimulus, white or not: the ridge's reliability is that
// of the ridge itself, see unitDetail).
func (m *Mapper) columns(units int) int { return 1 + 2*units }

// colY is the ridge column of unit u's counts.
func (m *Mapper) colY(u int) int { return 1 + 2*u }

// colA is the ridge column of unit u's half-A counts.
func (m *Mapper) colA(u int) int { return 2 + 2*u }
