package ingest

import (
	"errors"
	"fmt"
	"math"
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

// intake is the message path: it decodes each message, bins frames and
// spikes, numbers new units and queues what it decided for the estimator.
// It never waits for an estimate update. Nothing here is touched from
// another goroutine.
type intake struct {
	c *Loop
	q *eventQueue

	dec    wire.Decoder
	frames wire.Frames // decoded into, reused
	spikes wire.Spikes

	// The running block; binner is nil while none runs.
	block       string
	src         stimulus.Source
	binner      *binning.Binner
	framePeriod float64
	bin         binning.Bin
	ids         map[string]int // unit id → mapper index, for the running block
	units       []int          // scratch: unit indices of one spikes message
	times       []float64      // scratch: spike times of this shard's units
	fresh       map[string]int // scratch: new ids of one spikes message

	rejected []string // recent rejected block ids, oldest first

	// Settings carried across blocks.
	crit online.Criterion
	stc  map[string]bool

	clock       time.Time // latest arrival or clock tick seen
	lastBinEnd  float64
	forgetUntil float64 // bins starting by then are dropped (set by a reset)
	lateBase    uint64  // late spikes of the blocks before the running one
	heldBase    uint64
}

func (l *intake) init(c *Loop, q *eventQueue) {
	l.c, l.q = c, q
	l.dec.MaxSize = c.opt.MaxPayload
	l.fresh = map[string]int{}
	l.stc = map[string]bool{}
	l.crit = online.DefaultCriterion
	l.lastBinEnd = math.NaN()
	l.forgetUntil = math.Inf(-1)
}

func (l *intake) tick(t time.Time) {
	if t.After(l.clock) {
		l.clock = t
	}
}

// handle decodes one message and applies it. A rejected message changes no
// estimate; it is counted and returned.
func (l *intake) handle(m message) error {
	defer l.c.n.processed.Add(1)
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
		l.c.reject(reasonOf(err), err)
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

func (l *intake) onBlock(m message) error {
	b, err := l.dec.Block(m.data)
	if err != nil {
		return err
	}
	if b.Kind == wire.KindEnd {
		if l.binner == nil || b.Block != l.block {
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
func (l *intake) startBlock(b wire.Block, at time.Time) error {
	fail := func(reason string, err error) error {
		l.rejected = append(l.rejected, b.Block)
		if len(l.rejected) > rejectedBlocks {
			l.rejected = l.rejected[1:]
		}
		l.c.setBlock(func(s *blockState) { s.rejected, s.err = b.Block, err.Error() })
		return &rejection{reason: reason, err: err}
	}
	src, err := openStimulus(b.Stimulus, l.c.opt.StimuliDir)
	if err != nil {
		return fail(ReasonBadStimulus, fmt.Errorf("ingest: block %q: %w", b.Block, err))
	}
	shape := stimulusShape(src, b)
	cfg := online.Config{
		Width:         src.Width(),
		Height:        src.Height(),
		Lags:          b.Lags,
		FramePeriod:   b.FramePeriod,
		White:         src.White(),
		PixelVariance: src.PixelVariance(),
		Target:        l.crit.Target,
		Fraction:      l.crit.Fraction,
		Geometry:      geometry(b.Geometry),
		Lambda:        l.c.lambdaFor(shape),
		Prior:         l.c.opt.Prior,
		PriorInline:   l.c.priorInline(),
	}
	mp, err := online.NewMapper(cfg)
	if err != nil {
		return fail(ReasonBadConfig, fmt.Errorf("ingest: block %q: %w", b.Block, err))
	}
	period := mp.Config().FramePeriod
	bn, err := binning.New(binning.Config{FramePeriod: period, Grace: l.c.opt.Grace, MaxUnits: l.c.opt.MaxUnits})
	if err != nil {
		return fail(ReasonBadConfig, fmt.Errorf("ingest: block %q: %w", b.Block, err))
	}
	if l.binner != nil {
		// A new start ends the running block: its last bins are flushed.
		l.endBlock(math.Inf(1), at)
	}
	l.block, l.src, l.binner, l.framePeriod = b.Block, src, bn, period
	l.ids = map[string]int{}
	l.lastBinEnd = math.NaN()
	l.forgetUntil = math.Inf(-1)
	l.c.n.blocks.Add(1)
	l.c.n.units.Store(0)
	l.c.setBlock(func(s *blockState) { s.block, s.state = b.Block, "running" })
	l.q.push(event{kind: evStart, at: at, start: &blockStart{block: b.Block, shape: shape, mapper: mp, src: src}}, nil)
	return nil
}

// endBlock closes the last bins (up to t; +Inf for all) and queues the
// block's end.
func (l *intake) endBlock(t float64, at time.Time) {
	if math.IsInf(t, 1) {
		t = l.c.n.streamTime()
		if math.IsNaN(t) {
			t = 0
		}
		t += l.c.opt.Grace + l.framePeriod
	}
	if err := l.binner.End(t); err != nil {
		l.c.reject(ReasonBadFrames, fmt.Errorf("ingest: end of block %q: %w", l.block, err))
	}
	l.binner.Flush()
	l.drain(at)
	l.q.push(event{kind: evEnd, at: at}, nil)
	late, held := l.binCounts()
	l.lateBase, l.heldBase = late, held
	l.binner, l.src = nil, nil
	l.c.setBlock(func(s *blockState) { s.state = "ended" })
}

func (l *intake) onFrames(m message) error {
	if err := l.dec.FramesTo(&l.frames, m.data); err != nil {
		return err
	}
	f := &l.frames
	if l.binner == nil || f.Block != l.block {
		for _, id := range l.rejected {
			if id == f.Block {
				return rejectf(ReasonBlockRejected, "ingest: frames of rejected block %q", f.Block)
			}
		}
		if l.binner == nil {
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
		l.c.n.seen(f.T[k-1])
		// Frames flowing while spikes are silent: spikes more than
		// quietAdvance behind the frames count as late, so that bins
		// still close when no unit fires.
		l.binner.Advance(f.T[k-1] - quietAdvance)
	}
	l.drain(m.at)
	return nil
}

func (l *intake) onSpikes(m message) error {
	if err := l.dec.SpikesTo(&l.spikes, m.data); err != nil {
		return err
	}
	s := &l.spikes
	if l.binner == nil {
		// Spikes flow between blocks too; they are counted, not mapped.
		l.c.n.idleSpikes.Add(uint64(len(s.T)))
		return nil
	}
	if s.Block != "" && s.Block != l.block {
		return rejectf(ReasonUnknownBlock, "ingest: spikes of block %q, but the running block is %q", s.Block, l.block)
	}
	// Check the unit cap before registering anything, so that a refused
	// message leaves the block as it was. Units of other shards are
	// neither registered nor counted against the cap.
	sh := l.c.opt.Shard
	clear(l.fresh)
	have := len(l.ids)
	// Each spike's unit is looked up once: l.units holds its index, or
	// −1 for a unit new to the block, −2 for another shard's.
	l.units = l.units[:0]
	for _, id := range s.Unit {
		if u, ok := l.ids[id]; ok {
			l.units = append(l.units, u)
			continue
		}
		if !sh.Has(id) {
			l.units = append(l.units, -2)
			continue
		}
		l.units = append(l.units, -1)
		if _, ok := l.fresh[id]; ok {
			continue
		}
		l.fresh[id] = 0
		if have+len(l.fresh) > l.c.opt.MaxUnits {
			return rejectf(ReasonUnitCap, "ingest: spikes message would pass the cap of %d unit ids", l.c.opt.MaxUnits)
		}
	}
	sharded := sh.Count > 1
	l.times = l.times[:0]
	var other uint64
	kept := 0
	for i, id := range s.Unit {
		u := l.units[i]
		switch u {
		case -2:
			other++
			continue
		case -1:
			var ok bool
			if u, ok = l.ids[id]; !ok { // not met earlier in this message
				// The mapper numbers units in the order it meets them, as here.
				u = len(l.ids)
				l.ids[id] = u
				l.q.push(event{kind: evUnit, at: m.at, id: id}, nil)
				if l.stc[id] {
					// Asked for in an earlier block, or before the unit fired.
					l.q.push(event{kind: evFlag, at: m.at, id: id, on: true}, nil)
				}
			}
		}
		l.units[kept] = u // kept ≤ i: the index list is compacted in place
		kept++
		if sharded {
			l.times = append(l.times, s.T[i])
		}
	}
	l.units = l.units[:kept]
	ts := s.T
	if sharded {
		ts = l.times
	}
	l.binner.AddSpikes(l.units, ts)
	l.c.n.spikes.Add(uint64(len(ts)))
	l.c.n.otherShard.Add(other)
	if k := len(s.T); k > 0 {
		// The watermark follows every unit's spikes, this shard's or not,
		// so that bins close as they would in one unsharded worker.
		l.binner.Advance(s.T[k-1])
		l.c.n.seen(s.T[k-1])
	}
	if len(l.fresh) > 0 {
		l.c.n.units.Store(int64(len(l.ids)))
	}
	l.drain(m.at)
	return nil
}

func (l *intake) onControl(m message) error {
	c, err := l.dec.Control(m.data)
	if err != nil {
		return err
	}
	switch c.Command {
	case wire.CommandReset:
		l.reset(m.at)
	case wire.CommandFlagSTC:
		l.flagSTC(c.Unit, true, m.at)
	case wire.CommandUnflagSTC:
		l.flagSTC(c.Unit, false, m.at)
	case wire.CommandCriterion:
		if err := l.setCriterion(online.Criterion{Target: c.Target, Fraction: c.Fraction}, m.at); err != nil {
			return &rejection{reason: wire.ReasonBadCriterion, err: err}
		}
	default:
		return rejectf(ReasonUnknownCmd, "ingest: unknown control command %q", c.Command)
	}
	return nil
}

// drain queues every closed bin for the estimator. A bin that does not
// follow the one before (a pause in the stimulus, a bin dropped by a
// reset) first queues a restart of the lag history.
func (l *intake) drain(at time.Time) {
	var bins uint64
	for l.binner.Next(&l.bin) {
		if l.bin.Start <= l.forgetUntil {
			continue // data from before a reset
		}
		if !math.IsNaN(l.lastBinEnd) && l.bin.Start > l.lastBinEnd+l.framePeriod/2 {
			l.q.push(event{kind: evGap, at: at}, nil)
		}
		l.q.push(event{kind: evBin, at: at, frame: l.bin.Frame, end: l.bin.End}, l.bin.Counts)
		l.lastBinEnd = l.bin.End
		bins++
	}
	if bins > 0 {
		l.c.n.bins.Add(bins)
		l.c.n.binT.Store(math.Float64bits(l.lastBinEnd))
	}
	late, heldFrames := l.binCounts()
	l.c.n.late.Store(late)
	l.c.n.held.Store(heldFrames)
}

func (l *intake) reset(at time.Time) {
	l.c.n.resets.Add(1)
	if l.binner == nil {
		return
	}
	// Everything received so far is forgotten, including the bins still
	// waiting for late spikes.
	l.forgetUntil = l.c.n.streamTime()
	l.lastBinEnd = math.NaN()
	l.q.push(event{kind: evReset, at: at}, nil)
}

func (l *intake) flagSTC(id string, on bool, at time.Time) {
	if on {
		l.stc[id] = true
	} else {
		delete(l.stc, id)
	}
	if l.binner != nil {
		l.q.push(event{kind: evFlag, at: at, id: id, on: on}, nil)
	}
}

// setCriterion checks c (online.Criterion.Check, the one rule) and keeps
// it for this block and the next ones; a bad one changes nothing.
func (l *intake) setCriterion(c online.Criterion, at time.Time) error {
	if err := c.Check(); err != nil {
		return fmt.Errorf("ingest: %w", err)
	}
	l.crit = c
	if l.binner != nil {
		l.q.push(event{kind: evCriterion, at: at, crit: c}, nil)
	}
	return nil
}

// binCounts are the late spikes and held frames of all blocks so far.
func (l *intake) binCounts() (late, held uint64) {
	late, held = l.lateBase, l.heldBase
	if l.binner != nil {
		st := l.binner.Stats()
		late += uint64(st.LateSpikes)
		held += uint64(st.HeldFrames)
	}
	return late, held
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

// openStimulus parses a block start's stimulus spec and opens its source.
func openStimulus(raw []byte, dir string) (stimulus.Source, error) {
	spec, err := stimulus.ParseSpec(raw)
	if err != nil {
		return nil, err
	}
	return stimulus.Open(spec, dir)
}

func geometry(g *wire.Geometry) *online.Geometry {
	if g == nil {
		return nil
	}
	return &online.Geometry{DistanceCM: g.DistanceCM, PixelSizeCM: g.PixelSizeCM}
}

// priorInline says where the mapper fits the smooth-local estimate: on its
// background worker in a Rig; inline in a Loop (replay, export; pipelined
// or not), so that the
// estimates are reproducible: every significant unit at each update when
// only the final update is made (an export), otherwise a few units per
// update, round-robin.
func (c *Loop) priorInline() int {
	switch {
	case c.async && !c.paced:
		return 0
	case c.opt.UpdateEvery >= time.Hour:
		return online.PriorInlineAll
	default:
		return 4
	}
}
