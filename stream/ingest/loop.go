package ingest

import (
	"errors"
	"fmt"
	"math"
	"sync"
	"sync/atomic"
	"time"

	"livefield/online"
	"livefield/stream/binning"
	"livefield/stream/stimulus"
	"livefield/stream/wire"
)

// rejectedBlocks is how many rejected block ids are remembered, so that
// their frames are counted under ReasonBlockRejected.
const rejectedBlocks = 16

// quietAdvance is how far (seconds) the spike watermark may trail the
// latest frame onset: it keeps bins closing while no unit fires.
const quietAdvance = 2.0

// Loop is the NATS-free core of one rig's ingest: it decodes, bins and
// estimates the messages given to Feed, in the order given, and publishes
// a snapshot once per UpdateEvery of the arrival clock. Start runs one for
// the messages it reads from NATS; replay runs one over a session file.
//
// Feed, Advance, Update, Finish, Reset, FlagSTC, SetCriterion and Totals
// must be called from one goroutine at a time (the feeder's). Snapshot,
// Counters and Health may be called from any goroutine.
type Loop struct {
	opt Options

	snap      atomic.Pointer[online.Snapshot]
	processed atomic.Uint64 // messages handled (accepted or rejected)
	queueDrop atomic.Uint64 // counted by a Rig's NATS callbacks

	mu       sync.Mutex // guards health and lambdas
	health   Health
	lambdas  map[string]float64 // evidence λ by stimulus shape (stimulusShape)
	byBlock  map[string]float64 // evidence λ by block id
	evidence sync.WaitGroup     // running evidence fits

	logged map[string]time.Time // last log line per reason; feeder only

	st loop // feeder only
}

// NewLoop returns a Loop with no block running. Options.Prefix may be
// empty; the NATS settings (Durable, Stream, Consumer, Queue, Pending…)
// are not used.
func NewLoop(opt Options) (*Loop, error) {
	if err := opt.fill(); err != nil {
		return nil, err
	}
	return newLoop(opt), nil
}

func newLoop(opt Options) *Loop {
	c := &Loop{opt: opt, logged: map[string]time.Time{}, lambdas: map[string]float64{}, byBlock: map[string]float64{}}
	c.health.Rejected = map[string]uint64{}
	nan := online.Float(math.NaN()) // unknown until the first update; JSON null
	c.health.StreamTime, c.health.BinTime, c.health.StreamLag, c.health.Lag = nan, nan, nan, nan
	c.health.EvidenceLambda = nan
	c.health.Shard = opt.Shard.String()
	c.st.init(c)
	return c
}

// Error is a message the ingest refused; the estimates are unchanged.
type Error struct {
	Subject string // "block", "frames", "spikes", "control" or another suffix
	Reason  string // a wire rejection reason or one of the Reason constants
	Err     error
}

func (e *Error) Error() string { return e.Err.Error() }
func (e *Error) Unwrap() error { return e.Err }

// Feed applies one message that arrived at at on the subject suffix
// subject ("block", "frames", "spikes" or "control"), then runs an update
// when UpdateEvery has passed on the arrival clock. A refused message is
// counted and returned as an *Error. data is not kept.
func (c *Loop) Feed(subject string, data []byte, at time.Time) error {
	subj := subjectOf(subject)
	err := c.st.handle(message{subj: subj, data: data, at: at})
	c.st.maybeUpdate(at)
	if err != nil {
		name := subject
		if subj != subjOther {
			name = subjectNames[subj]
		}
		return &Error{Subject: name, Reason: reasonOf(err), Err: err}
	}
	return nil
}

// Advance runs an update when UpdateEvery has passed on the clock now,
// without a message (a clock tick).
func (c *Loop) Advance(now time.Time) { c.st.maybeUpdate(now) }

// Update folds the bins closed so far into the estimates now and publishes
// the snapshot.
func (c *Loop) Update(now time.Time) *online.Snapshot {
	c.st.tick(now)
	c.st.update(now)
	return c.Snapshot()
}

// Finish ends a block still running, as a new block start would, and
// returns the latest snapshot.
func (c *Loop) Finish(at time.Time) *online.Snapshot {
	c.st.tick(at)
	if c.st.mapper != nil {
		c.st.endBlock(math.Inf(1), at)
	}
	return c.Snapshot()
}

// Reset forgets the estimates of the running block (the electrode moved);
// units stay registered and the stream goes on.
func (c *Loop) Reset() { c.st.reset() }

// FlagSTC asks for (or stops) spike-triggered covariance on one unit, in
// the running block and the blocks after it.
func (c *Loop) FlagSTC(id string, on bool) error { return c.st.flagSTC(id, on) }

// SetCriterion changes the target reliability and the block fraction, for
// the running block and the blocks after it.
func (c *Loop) SetCriterion(target, fraction float64) error {
	if !(target > 0 && target < 1) || !(fraction > 0 && fraction <= 1) {
		return fmt.Errorf("ingest: criterion target %v, fraction %v out of range", target, fraction)
	}
	return c.st.setCriterion(target, fraction)
}

// Snapshot is the latest published update (nil before the first block's
// first update). Safe from any goroutine.
func (c *Loop) Snapshot() *online.Snapshot { return c.snap.Load() }

// Totals are a Loop's live counts; Health has those of the last update.
type Totals struct {
	Messages uint64  // handled, accepted or rejected
	Blocks   uint64  // blocks started
	Bins     uint64  // bins given to the mapper
	Spikes   uint64  // spikes accepted
	Block    string  // the running block, "" between blocks
	StreamT  float64 // latest spike or frame time (0 before any)
}

// Totals returns the live counts. Call it from the feeding goroutine.
func (c *Loop) Totals() Totals {
	t := Totals{Messages: c.processed.Load(), Bins: c.st.binsTotal, Spikes: c.st.spikesTotal, Blocks: c.st.blocks}
	if c.st.mapper != nil {
		t.Block = c.st.block
	}
	if !math.IsNaN(c.st.streamT) {
		t.StreamT = c.st.streamT
	}
	return t
}

// loop is the state of the feeding (owner) goroutine. Nothing here is
// touched from another goroutine.
type loop struct {
	r *Loop

	dec    wire.Decoder
	frames wire.Frames // decoded into, reused
	spikes wire.Spikes

	// The running block; mapper is nil while none runs.
	block    string
	shape    string // stimulusShape of the running block
	src      stimulus.Source
	binner   *binning.Binner
	mapper   *online.Mapper
	frame    []float64 // one stimulus frame
	bin      binning.Bin
	ids      map[string]int // unit id → mapper index, for the running block
	units    []int          // scratch: unit indices of one spikes message
	times    []float64      // scratch: spike times of this shard's units
	fresh    map[string]int // scratch: new ids of one spikes message
	lastBins uint64         // bins given to the mapper at the last update
	dirty    bool           // bins added since the last update

	rejected []string // recent rejected block ids, oldest first

	// Settings carried across blocks.
	target, fraction float64
	stc              map[string]bool

	clock       time.Time // latest arrival or clock tick seen
	lastUpdate  time.Time
	queueDrops  uint64    // queue drops already logged
	closedAt    time.Time // arrival of the message that closed the first bin since the last update
	streamT     float64
	lastBinEnd  float64
	forgetUntil float64 // bins starting by then are dropped (set by a reset)
	binsTotal   uint64
	blocks      uint64
	lateBase    uint64 // late spikes of the blocks before the running one
	heldBase    uint64
	spikesTotal uint64
	otherShard  uint64 // spikes of units of other shards
}

func (l *loop) init(r *Loop) {
	l.r = r
	l.dec.MaxSize = r.opt.MaxPayload
	l.fresh = map[string]int{}
	l.stc = map[string]bool{}
	l.streamT = math.NaN()
	l.lastBinEnd = math.NaN()
	l.forgetUntil = math.Inf(-1)
}

func (l *loop) tick(t time.Time) {
	if t.After(l.clock) {
		l.clock = t
	}
}

// handle decodes one message and applies it. A rejected message changes no
// estimate; it is counted and returned.
func (l *loop) handle(m message) error {
	defer l.r.processed.Add(1)
	l.tick(m.at)
	var err error
	switch m.subj {
	case subjBlock:
		err = l.onBlock(m)
	case subjFrames:
		err = l.onFrames(m)
	case subjSpikes:
		err = l.onSpikes(m)
	case subjControl:
		err = l.onControl(m)
	default:
		err = rejectf(ReasonSubject, "ingest: message on a subject that is not block, frames, spikes or control")
	}
	if err != nil {
		l.r.reject(reasonOf(err), err)
	}
	return err
}

// rejection is an ingest-level refusal with its counter key.
type rejection struct {
	reason string
	err    error
}

func (e *rejection) Error() string { return e.err.Error() }
func (e *rejection) Unwrap() error { return e.err }

func rejectf(reason, format string, args ...any) error {
	return &rejection{reason: reason, err: fmt.Errorf(format, args...)}
}

func reasonOf(err error) string {
	var rj *rejection
	if errors.As(err, &rj) {
		return rj.reason
	}
	var we *wire.Error
	if errors.As(err, &we) {
		return we.Reason
	}
	return ReasonMalformed
}

func (l *loop) onBlock(m message) error {
	b, err := l.dec.Block(m.data)
	if err != nil {
		return err
	}
	if b.Kind == wire.KindEnd {
		if l.mapper == nil || b.Block != l.block {
			return rejectf(ReasonUnknownBlock, "ingest: end of block %q, but the running block is %q", b.Block, l.block)
		}
		l.endBlock(b.T, m.at)
		return nil
	}
	return l.startBlock(b, m.at)
}

// startBlock opens the block's stimulus, mapper and binner; only when all
// three are good does it end the running block and switch to the new one,
// so a rejected start leaves the running block as it was.
func (l *loop) startBlock(b wire.Block, at time.Time) error {
	fail := func(reason string, err error) error {
		l.rejected = append(l.rejected, b.Block)
		if len(l.rejected) > rejectedBlocks {
			l.rejected = l.rejected[1:]
		}
		l.r.mu.Lock()
		l.r.health.RejectedBlock = b.Block
		l.r.health.BlockError = err.Error()
		l.r.mu.Unlock()
		return &rejection{reason: reason, err: err}
	}
	src, err := openStimulus(b.Stimulus, l.r.opt.StimuliDir)
	if err != nil {
		return fail(ReasonBadStimulus, fmt.Errorf("ingest: block %q: %w", b.Block, err))
	}
	cfg := online.Config{
		Width:         src.Width(),
		Height:        src.Height(),
		Lags:          b.Lags,
		FramePeriod:   b.FramePeriod,
		White:         src.White(),
		PixelVariance: src.PixelVariance(),
		Target:        l.target,
		Fraction:      l.fraction,
		Geometry:      geometry(b.Geometry),
		Lambda:        l.r.lambdaFor(stimulusShape(src, b)),
	}
	mp, err := online.NewMapper(cfg)
	if err != nil {
		return fail(ReasonBadConfig, fmt.Errorf("ingest: block %q: %w", b.Block, err))
	}
	bn, err := binning.New(binning.Config{FramePeriod: mp.Config().FramePeriod, Grace: l.r.opt.Grace, MaxUnits: l.r.opt.MaxUnits})
	if err != nil {
		return fail(ReasonBadConfig, fmt.Errorf("ingest: block %q: %w", b.Block, err))
	}
	if l.mapper != nil {
		// A new start ends the running block: its last bins are flushed.
		l.endBlock(math.Inf(1), at)
	}
	l.block, l.src, l.mapper, l.binner = b.Block, src, mp, bn
	l.shape = stimulusShape(src, b)
	l.frame = make([]float64, src.Width()*src.Height())
	l.ids = map[string]int{}
	l.lastBins, l.dirty = 0, false
	l.lastBinEnd = math.NaN()
	l.forgetUntil = math.Inf(-1)
	for id, on := range l.stc {
		mp.FlagSTC(id, on)
	}
	l.r.mu.Lock()
	l.r.health.Block = b.Block
	l.r.health.BlockState = "running"
	l.r.health.Blocks++
	l.blocks++
	l.r.health.Units = 0
	l.r.mu.Unlock()
	l.publish(mp.Update())
	return nil
}

// endBlock flushes the last bins (up to t; +Inf for all) and publishes a
// final update. The snapshot stays visible until the next block starts.
func (l *loop) endBlock(t float64, at time.Time) {
	if math.IsInf(t, 1) {
		t = l.streamT
		if math.IsNaN(t) {
			t = 0
		}
		t += l.r.opt.Grace + l.mapper.Config().FramePeriod
	}
	if err := l.binner.End(t); err != nil {
		l.r.reject(ReasonBadFrames, fmt.Errorf("ingest: end of block %q: %w", l.block, err))
	}
	l.binner.Flush()
	l.drain(at)
	l.update(at)
	if f := l.r.opt.OnBlockEnd; f != nil {
		f(l.block, l.r.snap.Load(), at)
	}
	late, held := l.binCounts()
	l.lateBase, l.heldBase = late, held
	if l.r.opt.Evidence && l.r.opt.Lambda == 0 {
		l.r.fitEvidence(l.block, l.shape, l.mapper)
	}
	l.mapper, l.binner, l.src = nil, nil, nil
	l.r.mu.Lock()
	l.r.health.BlockState = "ended"
	l.r.mu.Unlock()
}

func (l *loop) onFrames(m message) error {
	if err := l.dec.FramesTo(&l.frames, m.data); err != nil {
		return err
	}
	f := &l.frames
	if l.mapper == nil || f.Block != l.block {
		for _, id := range l.rejected {
			if id == f.Block {
				return rejectf(ReasonBlockRejected, "ingest: frames of rejected block %q", f.Block)
			}
		}
		if l.mapper == nil {
			return rejectf(ReasonNoBlock, "ingest: frames of block %q while no block runs", f.Block)
		}
		return rejectf(ReasonUnknownBlock, "ingest: frames of block %q, but the running block is %q", f.Block, l.block)
	}
	if n := l.src.Frames(); n >= 0 {
		for _, ix := range f.Index {
			if ix >= n {
				return rejectf(ReasonFrameRange, "ingest: frame %d past the end of a %d-frame stimulus", ix, n)
			}
		}
	}
	if err := l.binner.AddFrames(f.Index, f.T); err != nil {
		return &rejection{reason: ReasonBadFrames, err: fmt.Errorf("ingest: %w", err)}
	}
	if k := len(f.T); k > 0 {
		l.seen(f.T[k-1])
		// Frames flowing while spikes are silent: spikes more than
		// quietAdvance behind the frames count as late, so that bins
		// still close when no unit fires.
		l.binner.Advance(f.T[k-1] - quietAdvance)
	}
	l.drain(m.at)
	return nil
}

func (l *loop) onSpikes(m message) error {
	if err := l.dec.SpikesTo(&l.spikes, m.data); err != nil {
		return err
	}
	s := &l.spikes
	if l.mapper == nil {
		// Spikes flow between blocks too; they are counted, not mapped.
		l.r.mu.Lock()
		l.r.health.IdleSpikes += uint64(len(s.T))
		l.r.mu.Unlock()
		return nil
	}
	if s.Block != "" && s.Block != l.block {
		return rejectf(ReasonUnknownBlock, "ingest: spikes of block %q, but the running block is %q", s.Block, l.block)
	}
	// Check the unit cap before registering anything, so that a refused
	// message leaves the mapper as it was. Units of other shards are
	// neither registered nor counted against the cap.
	sh := l.r.opt.Shard
	clear(l.fresh)
	have := l.mapper.Units()
	for _, id := range s.Unit {
		if _, ok := l.fresh[id]; ok {
			continue
		}
		if _, ok := l.ids[id]; ok || !sh.Has(id) {
			continue
		}
		l.fresh[id] = 0
		if have+len(l.fresh) > l.r.opt.MaxUnits {
			return rejectf(ReasonUnitCap, "ingest: spikes message would pass the cap of %d unit ids", l.r.opt.MaxUnits)
		}
	}
	sharded := sh.Count > 1
	l.units, l.times = l.units[:0], l.times[:0]
	for i, id := range s.Unit {
		u, ok := l.ids[id]
		if !ok {
			if sharded && !sh.Has(id) {
				l.otherShard++
				continue
			}
			u = l.mapper.Unit(id)
			l.ids[id] = u
		}
		l.units = append(l.units, u)
		if sharded {
			l.times = append(l.times, s.T[i])
		}
	}
	ts := s.T
	if sharded {
		ts = l.times
	}
	l.binner.AddSpikes(l.units, ts)
	l.spikesTotal += uint64(len(ts))
	if k := len(s.T); k > 0 {
		// The watermark follows every unit's spikes, this shard's or not,
		// so that bins close as they would in one unsharded worker.
		l.binner.Advance(s.T[k-1])
		l.seen(s.T[k-1])
	}
	if len(l.fresh) > 0 {
		n := l.mapper.Units()
		l.r.mu.Lock()
		l.r.health.Units = n
		l.r.mu.Unlock()
	}
	l.drain(m.at)
	return nil
}

func (l *loop) onControl(m message) error {
	c, err := l.dec.Control(m.data)
	if err != nil {
		return err
	}
	switch c.Command {
	case wire.CommandReset:
		l.reset()
	case wire.CommandFlagSTC:
		return l.flagSTC(c.Unit, true)
	case wire.CommandUnflagSTC:
		return l.flagSTC(c.Unit, false)
	case wire.CommandCriterion:
		return l.setCriterion(c.Target, c.Fraction)
	default:
		return rejectf(ReasonUnknownCmd, "ingest: unknown control command %q", c.Command)
	}
	return nil
}

func (l *loop) seen(t float64) {
	if math.IsNaN(l.streamT) || t > l.streamT {
		l.streamT = t
	}
}

// drain hands every closed bin to the mapper.
func (l *loop) drain(at time.Time) {
	closed := false
	for l.binner.Next(&l.bin) {
		if l.bin.Start <= l.forgetUntil {
			continue // data from before a reset
		}
		if err := l.src.FrameTo(l.frame, l.bin.Frame); err != nil {
			l.r.reject(ReasonFrameRange, fmt.Errorf("ingest: bin of frame %d: %w", l.bin.Frame, err))
			continue
		}
		l.mapper.AddBin(l.frame, l.bin.Counts)
		l.binsTotal++
		l.lastBinEnd = l.bin.End
		closed = true
	}
	if closed && !l.dirty {
		// The first bins since the last update: they wait longest.
		l.closedAt = at
		l.dirty = true
	}
}

func (l *loop) maybeUpdate(now time.Time) {
	l.tick(now)
	if l.mapper == nil {
		return
	}
	if now.Sub(l.lastUpdate) >= l.r.opt.UpdateEvery {
		l.update(now)
	}
}

// update folds the new bins into the estimates and publishes a snapshot.
func (l *loop) update(now time.Time) {
	l.lastUpdate = now
	if n := l.r.queueDrop.Load(); n > l.queueDrops {
		// Counted by the NATS callback; logged here, rate-limited.
		l.r.logRejection(ReasonQueueFull, n, fmt.Errorf("ingest: %d messages dropped: the queue of %d stayed full", n-l.queueDrops, l.r.opt.Queue))
		l.queueDrops = n
	}
	if l.mapper == nil {
		return
	}
	lag := math.NaN()
	if l.dirty && !l.closedAt.IsZero() {
		lag = now.Sub(l.closedAt).Seconds()
	}
	t0 := time.Now()
	l.publish(l.mapper.Update())
	took := time.Since(t0).Seconds()
	l.dirty = false
	late, held := l.binCounts()
	l.r.mu.Lock()
	h := &l.r.health
	h.Updates++
	h.UpdateSeconds = took
	h.LastUpdate = stamp(now)
	h.Bins = l.binsTotal
	h.SpikesTotal = l.spikesTotal
	h.LateSpikes = late
	h.HeldFrames = held
	h.StreamTime = online.Float(l.streamT)
	h.BinTime = online.Float(l.lastBinEnd)
	h.StreamLag = online.Float(l.streamT - l.lastBinEnd)
	if !math.IsNaN(lag) {
		h.Lag = online.Float(lag)
	}
	h.Units = l.mapper.Units()
	h.OtherShardSpikes = l.otherShard
	l.r.mu.Unlock()
}

// publish stores s for readers, naming the block when the mapper did not.
func (l *loop) publish(s *online.Snapshot) {
	if s == nil {
		return
	}
	if s.Block == "" {
		cp := *s
		cp.Block = l.block
		s = &cp
	}
	l.r.snap.Store(s)
	if f := l.r.opt.OnUpdate; f != nil {
		f(l.block, s, l.clock)
	}
}

func (l *loop) reset() {
	l.r.mu.Lock()
	l.r.health.Resets++
	l.r.mu.Unlock()
	if l.mapper == nil {
		return
	}
	// Everything received so far is forgotten, including the bins still
	// waiting for late spikes.
	l.forgetUntil = l.streamT
	l.mapper.Reset()
	l.publish(l.mapper.Update())
}

func (l *loop) flagSTC(id string, on bool) error {
	if on {
		l.stc[id] = true
	} else {
		delete(l.stc, id)
	}
	if l.mapper == nil {
		return nil
	}
	l.mapper.FlagSTC(id, on)
	return nil
}

func (l *loop) setCriterion(target, fraction float64) error {
	l.target, l.fraction = target, fraction
	if l.mapper != nil {
		l.mapper.SetCriterion(target, fraction)
		l.publish(l.mapper.Update())
	}
	return nil
}

// stimulusShape names what the evidence choice of λ carries from one block
// to the next: the frame size and lags, and for white noise its pixel
// variance, for other stimuli the whole spec (the seed of a noise stimulus
// does not change the best penalty; a movie's content does).
func stimulusShape(src stimulus.Source, b wire.Block) string {
	if src.White() {
		return fmt.Sprintf("%d×%d×%d white %g", src.Width(), src.Height(), b.Lags, src.PixelVariance())
	}
	return fmt.Sprintf("%d×%d×%d %s", src.Width(), src.Height(), b.Lags, b.Stimulus)
}

// lambdaFor is the penalty for a block of this stimulus shape: the one
// given, else the evidence choice of an earlier block of the same shape,
// else 0 (the estimator's default).
func (c *Loop) lambdaFor(shape string) float64 {
	if c.opt.Lambda > 0 || !c.opt.Evidence {
		return c.opt.Lambda
	}
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.lambdas[shape]
}

// fitEvidence chooses λ by the evidence from a finished block's mapper, in
// its own goroutine: the mapper is no longer fed, so the goroutine owns it.
// Close waits for it (WaitEvidence).
func (c *Loop) fitEvidence(block, shape string, m *online.Mapper) {
	c.mu.Lock()
	c.health.EvidenceRunning = block
	c.mu.Unlock()
	c.evidence.Add(1)
	go func() {
		defer c.evidence.Done()
		lambda, _, err := m.Evidence()
		c.mu.Lock()
		defer c.mu.Unlock()
		c.health.EvidenceRunning = ""
		if err != nil || !(lambda > 0) || math.IsInf(lambda, 0) {
			c.health.EvidenceError = fmt.Sprintf("block %s: %v (λ = %v)", block, err, lambda)
			return
		}
		c.lambdas[shape] = lambda
		c.byBlock[block] = lambda
		c.health.EvidenceLambda = online.Float(lambda)
		c.health.EvidenceBlock = block
		c.health.EvidenceError = ""
		c.opt.Logger.Info("ingest: evidence choice of the ridge penalty", "block", block, "lambda", lambda)
	}()
}

// WaitEvidence waits for the evidence fits still running.
func (c *Loop) WaitEvidence() { c.evidence.Wait() }

// EvidenceOf is the evidence choice of λ from the named block, once its fit
// has finished (WaitEvidence); ok is false when there is none.
func (c *Loop) EvidenceOf(block string) (lambda float64, ok bool) {
	c.mu.Lock()
	defer c.mu.Unlock()
	lambda, ok = c.byBlock[block]
	return lambda, ok
}
