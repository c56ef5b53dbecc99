package replay

import (
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"sync"
	"sync/atomic"
	"time"

	"livefield/online"
	"livefield/replay/session"
	"livefield/stream/binning"
	"livefield/stream/stimulus"
	"livefield/stream/wire"
)

// DefaultUpdateEvery is the arrival-time interval between two estimate
// updates of a Feeder, the same cadence as the live ingest.
const DefaultUpdateEvery = time.Second

// FeedOptions configure a Feeder.
type FeedOptions struct {
	// StimuliDir is where movie files named by a stimulus spec are looked up.
	StimuliDir string
	// Grace is the seconds a bin waits for late spikes
	// (binning.DefaultGrace when 0).
	Grace float64
	// UpdateEvery is the arrival-time interval between estimate updates
	// (DefaultUpdateEvery when 0).
	UpdateEvery time.Duration
	// OnUpdate, when set, is called with the block id, every snapshot the
	// feeder publishes and the arrival time it was made at. It runs with
	// the feeder locked (on the feeding goroutine, or on the goroutine of a
	// Reset or SetCriterion) and must not call the feeder.
	OnUpdate func(block string, s *online.Snapshot, at time.Time)
	// OnBlockEnd, when set, is called likewise with the final snapshot of
	// each block.
	OnBlockEnd func(block string, s *online.Snapshot, at time.Time)
}

// FeedStats count what a Feeder has taken.
type FeedStats struct {
	Messages int64            `json:"messages"`
	Rejected map[string]int64 `json:"rejected"` // by reason
	Blocks   int64            `json:"blocks"`
	Bins     int64            `json:"bins"`
	Spikes   int64            `json:"spikes"`
	Block    string           `json:"block"` // the running block, "" between blocks
	Stream   float64          `json:"stream_t"`
}

// Feeder turns decoded session messages into estimates without NATS: it
// does what the live ingest does for one rig, with the records' arrival
// times as its clock.
type Feeder struct {
	opt  FeedOptions
	snap atomic.Pointer[online.Snapshot]

	mu    sync.Mutex // guards everything below
	dec   wire.Decoder
	fr    wire.Frames
	sp    wire.Spikes
	units []int

	block   string
	src     stimulus.Source
	binner  *binning.Binner
	mapper  *online.Mapper
	frame   []float64
	bin     binning.Bin
	ids     map[string]int
	dirty   bool
	last    time.Time // arrival of the last update
	now     time.Time // arrival of the latest message
	streamT float64

	stc              map[string]bool
	target, fraction float64
	stats            FeedStats
}

// NewFeeder returns a Feeder with no block running.
func NewFeeder(opt FeedOptions) (*Feeder, error) {
	if opt.Grace == 0 {
		opt.Grace = binning.DefaultGrace
	}
	if !(opt.Grace > 0) || math.IsInf(opt.Grace, 0) {
		return nil, fmt.Errorf("replay: grace %v is not a positive number of seconds", opt.Grace)
	}
	if opt.UpdateEvery == 0 {
		opt.UpdateEvery = DefaultUpdateEvery
	}
	if opt.UpdateEvery < 0 {
		return nil, fmt.Errorf("replay: update interval %v is negative", opt.UpdateEvery)
	}
	return &Feeder{opt: opt, stc: map[string]bool{}, stats: FeedStats{Rejected: map[string]int64{}}}, nil
}

// FeedError is a message the feeder refused; the estimates are unchanged.
type FeedError struct {
	Subject string
	Reason  string // a wire rejection reason, or "no-block", "unknown-block", "stimulus", "frames", "subject"
	Err     error
}

func (e *FeedError) Error() string {
	return fmt.Sprintf("replay: %s message refused (%s): %v", e.Subject, e.Reason, e.Err)
}

func (e *FeedError) Unwrap() error { return e.Err }

func refuse(subject, reason string, err error) *FeedError {
	return &FeedError{Subject: subject, Reason: reason, Err: err}
}

func wireRefusal(subject string, err error) *FeedError {
	var we *wire.Error
	if errors.As(err, &we) {
		return refuse(subject, we.Reason, err)
	}
	return refuse(subject, "malformed", err)
}

// Feed applies one message that arrived at at on subject suffix subject
// ("block", "frames", "spikes" or "control"). A refused message is
// returned as a *FeedError and counted. data is not kept.
func (f *Feeder) Feed(subject string, data []byte, at time.Time) error {
	f.mu.Lock()
	defer f.mu.Unlock()
	f.stats.Messages++
	if at.After(f.now) {
		f.now = at
	}
	var err *FeedError
	switch subject {
	case wire.SubjectBlock:
		err = f.onBlock(data)
	case wire.SubjectFrames:
		err = f.onFrames(data)
	case wire.SubjectSpikes:
		err = f.onSpikes(data)
	case wire.SubjectControl:
		err = f.onControl(data)
	default:
		err = refuse(subject, "subject", fmt.Errorf("unknown subject suffix %q", subject))
	}
	if f.mapper != nil && f.now.Sub(f.last) >= f.opt.UpdateEvery {
		f.update()
	}
	if err != nil {
		f.stats.Rejected[err.Reason]++
		return err
	}
	return nil
}

// Record feeds one session record.
func (f *Feeder) Record(r session.Record) error { return f.Feed(r.Subject, r.Data, r.At) }

func (f *Feeder) onBlock(data []byte) *FeedError {
	b, err := f.dec.Block(data)
	if err != nil {
		return wireRefusal(wire.SubjectBlock, err)
	}
	if b.Kind == wire.KindEnd {
		if f.mapper == nil || b.Block != f.block {
			return refuse(wire.SubjectBlock, "unknown-block", fmt.Errorf("end of block %q while the running block is %q", b.Block, f.block))
		}
		f.endBlock(b.T)
		return nil
	}
	if f.mapper != nil {
		f.endBlock(math.Inf(1))
	}
	spec, err := stimulus.ParseSpec(b.Stimulus)
	if err != nil {
		return refuse(wire.SubjectBlock, "stimulus", fmt.Errorf("block %q: %w", b.Block, err))
	}
	src, err := stimulus.Open(spec, f.opt.StimuliDir)
	if err != nil {
		return refuse(wire.SubjectBlock, "stimulus", fmt.Errorf("block %q: %w", b.Block, err))
	}
	cfg := online.Config{
		Width: src.Width(), Height: src.Height(),
		Lags: b.Lags, FramePeriod: b.FramePeriod,
		White: src.White(), PixelVariance: src.PixelVariance(),
		Target: f.target, Fraction: f.fraction,
	}
	if g := b.Geometry; g != nil {
		cfg.Geometry = &online.Geometry{DistanceCM: g.DistanceCM, PixelSizeCM: g.PixelSizeCM}
	}
	mp, err := online.NewMapper(cfg)
	if err != nil {
		return refuse(wire.SubjectBlock, "block", fmt.Errorf("block %q: %w", b.Block, err))
	}
	bn, err := binning.New(binning.Config{FramePeriod: mp.Config().FramePeriod, Grace: f.opt.Grace})
	if err != nil {
		return refuse(wire.SubjectBlock, "block", fmt.Errorf("block %q: %w", b.Block, err))
	}
	f.block, f.src, f.mapper, f.binner = b.Block, src, mp, bn
	f.frame = make([]float64, src.Width()*src.Height())
	f.ids = map[string]int{}
	for id, on := range f.stc {
		mp.FlagSTC(id, on)
	}
	f.stats.Blocks++
	f.stats.Block = b.Block
	f.last = f.now
	f.publish(mp.Update())
	return nil
}

// endBlock closes the running block at stream time t (+Inf: after the
// latest event) and publishes its final snapshot.
func (f *Feeder) endBlock(t float64) {
	if math.IsInf(t, 1) {
		t = f.streamT + f.opt.Grace + f.mapper.Config().FramePeriod
	}
	_ = f.binner.End(t) // a refused end still flushes what is known
	f.binner.Flush()
	f.drain()
	s := f.mapper.Update()
	f.publish(s)
	f.dirty = false
	if f.opt.OnBlockEnd != nil {
		f.opt.OnBlockEnd(f.block, s, f.now)
	}
	f.mapper, f.binner, f.src = nil, nil, nil
	f.stats.Block = ""
}

func (f *Feeder) onFrames(data []byte) *FeedError {
	if err := f.dec.FramesTo(&f.fr, data); err != nil {
		return wireRefusal(wire.SubjectFrames, err)
	}
	if f.mapper == nil || f.fr.Block != f.block {
		return refuse(wire.SubjectFrames, "unknown-block", fmt.Errorf("frames of block %q while the running block is %q", f.fr.Block, f.block))
	}
	if n := f.src.Frames(); n >= 0 {
		for _, ix := range f.fr.Index {
			if ix >= n {
				return refuse(wire.SubjectFrames, "frames", fmt.Errorf("frame %d past the end of a %d-frame stimulus", ix, n))
			}
		}
	}
	err := f.binner.AddFrames(f.fr.Index, f.fr.T)
	f.seen(f.fr.T)
	f.drain()
	if err != nil {
		return refuse(wire.SubjectFrames, "frames", err)
	}
	return nil
}

func (f *Feeder) onSpikes(data []byte) *FeedError {
	if err := f.dec.SpikesTo(&f.sp, data); err != nil {
		return wireRefusal(wire.SubjectSpikes, err)
	}
	if f.mapper == nil {
		return nil // spikes between blocks are not mapped
	}
	f.units = f.units[:0]
	for _, id := range f.sp.Unit {
		u, ok := f.ids[id]
		if !ok {
			u = f.mapper.Unit(id)
			f.ids[id] = u
		}
		f.units = append(f.units, u)
	}
	f.binner.AddSpikes(f.units, f.sp.T)
	f.stats.Spikes += int64(len(f.sp.T))
	f.seen(f.sp.T)
	f.drain()
	return nil
}

func (f *Feeder) onControl(data []byte) *FeedError {
	c, err := f.dec.Control(data)
	if err != nil {
		return wireRefusal(wire.SubjectControl, err)
	}
	switch c.Command {
	case wire.CommandReset:
		f.resetLocked()
	case wire.CommandFlagSTC, wire.CommandUnflagSTC:
		f.flagLocked(c.Unit, c.Command == wire.CommandFlagSTC)
	case wire.CommandCriterion:
		f.criterionLocked(c.Target, c.Fraction)
	}
	return nil
}

func (f *Feeder) seen(t []float64) {
	if k := len(t); k > 0 && !(t[k-1] <= f.streamT) {
		f.streamT = t[k-1]
		f.stats.Stream = t[k-1]
	}
}

// drain hands every closed bin to the mapper.
func (f *Feeder) drain() {
	for f.binner.Next(&f.bin) {
		if err := f.src.FrameTo(f.frame, f.bin.Frame); err != nil {
			f.stats.Rejected["frames"]++
			continue
		}
		f.mapper.AddBin(f.frame, f.bin.Counts)
		f.stats.Bins++
		f.dirty = true
	}
}

func (f *Feeder) update() {
	f.last = f.now
	if f.mapper == nil || !f.dirty {
		return
	}
	f.dirty = false
	f.publish(f.mapper.Update())
}

func (f *Feeder) publish(s *online.Snapshot) {
	if s == nil {
		return
	}
	f.snap.Store(s)
	if f.opt.OnUpdate != nil {
		f.opt.OnUpdate(f.block, s, f.now)
	}
}

// Finish ends a block still running (as a new block start would) and
// returns the latest snapshot.
func (f *Feeder) Finish() *online.Snapshot {
	f.mu.Lock()
	defer f.mu.Unlock()
	if f.mapper != nil {
		f.endBlock(math.Inf(1))
	}
	return f.snap.Load()
}

// Snapshot is the latest published snapshot (nil before the first block).
func (f *Feeder) Snapshot() *online.Snapshot { return f.snap.Load() }

// Stats returns the counts so far.
func (f *Feeder) Stats() FeedStats {
	f.mu.Lock()
	defer f.mu.Unlock()
	s := f.stats
	s.Rejected = make(map[string]int64, len(f.stats.Rejected))
	for k, v := range f.stats.Rejected {
		s.Rejected[k] = v
	}
	return s
}

// Health is Stats, for the display.
func (f *Feeder) Health() any { return f.Stats() }

// Reset forgets the running block's estimates.
func (f *Feeder) Reset() {
	f.mu.Lock()
	defer f.mu.Unlock()
	f.resetLocked()
}

func (f *Feeder) resetLocked() {
	if f.mapper != nil {
		f.mapper.Reset()
		f.publish(f.mapper.Update())
	}
}

// FlagSTC asks for (or stops) STC on one unit, in this and later blocks.
func (f *Feeder) FlagSTC(id string, on bool) error {
	f.mu.Lock()
	defer f.mu.Unlock()
	f.flagLocked(id, on)
	return nil
}

func (f *Feeder) flagLocked(id string, on bool) {
	if on {
		f.stc[id] = true
	} else {
		delete(f.stc, id)
	}
	if f.mapper != nil {
		f.mapper.FlagSTC(id, on)
	}
}

// SetCriterion changes the target reliability and block fraction.
func (f *Feeder) SetCriterion(target, fraction float64) error {
	if !(target > 0 && target <= 1) || !(fraction > 0 && fraction <= 1) {
		return fmt.Errorf("replay: criterion target %v, fraction %v not in (0, 1]", target, fraction)
	}
	f.mu.Lock()
	defer f.mu.Unlock()
	f.criterionLocked(target, fraction)
	return nil
}

func (f *Feeder) criterionLocked(target, fraction float64) {
	f.target, f.fraction = target, fraction
	if f.mapper != nil {
		f.mapper.SetCriterion(target, fraction)
		f.publish(f.mapper.Update())
	}
}

// PlayOptions configure Play.
type PlayOptions struct {
	// Speed scales the original timing: 1 is real time, 4 four times
	// faster; 0 (or +Inf) plays as fast as the callback takes records.
	Speed float64
	// From skips the records that arrived earlier than From after the
	// first record; the latest skipped block start (if its block has not
	// ended) is delivered first so the stimulus is known.
	From time.Duration
	// OnDamage, when set, is told of every damaged span of the file; Play
	// then goes on with the next good record. When nil, damage ends Play
	// with the error.
	OnDamage func(*session.CorruptError)
	// Wait is the pacing sleep (a timer honouring ctx when nil) and Now the
	// clock it is measured against (time.Now when nil).
	Wait func(ctx context.Context, d time.Duration) error
	Now  func() time.Time
}

// PlayStats count what Play delivered.
type PlayStats struct {
	Records int64         // delivered to the callback
	Skipped int64         // records before From, not delivered
	Damaged int64         // damaged spans skipped
	Bytes   int64         // payload bytes delivered
	Span    time.Duration // arrival time of the last delivered record after the first record
}

// Play reads r to the end and calls emit with each record, at the
// original pace scaled by opt.Speed. The record's Data is valid during the
// call only. It stops at the first error of emit, of ctx or (without
// OnDamage) of the file.
func Play(ctx context.Context, r *session.Reader, opt PlayOptions, emit func(session.Record) error) (PlayStats, error) {
	var st PlayStats
	if opt.Speed < 0 || math.IsNaN(opt.Speed) {
		return st, fmt.Errorf("replay: speed %v must be positive (0 for as fast as possible)", opt.Speed)
	}
	paced := opt.Speed > 0 && !math.IsInf(opt.Speed, 1)
	wait, now := opt.Wait, opt.Now
	if wait == nil {
		wait = sleep
	}
	if now == nil {
		now = time.Now
	}
	var first time.Time
	var wallStart time.Time
	var pending []byte // a skipped block start, still to be delivered
	var pendingAt time.Time
	started := false
	for {
		if err := ctx.Err(); err != nil {
			return st, err
		}
		rec, err := r.Next()
		if err == io.EOF {
			return st, nil
		}
		var ce *session.CorruptError
		if errors.As(err, &ce) {
			st.Damaged++
			if opt.OnDamage == nil {
				return st, err
			}
			opt.OnDamage(ce)
			continue
		}
		if err != nil {
			return st, err
		}
		if first.IsZero() {
			first = rec.At
		}
		off := rec.At.Sub(first)
		if off < opt.From {
			st.Skipped++
			if rec.Subject == wire.SubjectBlock {
				if b, err := wire.DecodeBlock(rec.Data); err == nil {
					if b.Kind == wire.KindStart {
						pending, pendingAt = append(pending[:0], rec.Data...), rec.At
					} else {
						pending = nil
					}
				}
			}
			continue
		}
		if !started {
			started = true
			wallStart = now()
			if pending != nil {
				if err := emit(session.Record{At: pendingAt, Subject: wire.SubjectBlock, Data: pending}); err != nil {
					return st, err
				}
				st.Records++
				st.Skipped--
			}
		}
		if paced {
			due := time.Duration(float64(off-opt.From) / opt.Speed)
			if d := due - now().Sub(wallStart); d > 0 {
				if err := wait(ctx, d); err != nil {
					return st, err
				}
			}
		}
		if err := emit(rec); err != nil {
			return st, err
		}
		st.Records++
		st.Bytes += int64(len(rec.Data))
		st.Span = off
	}
}

func sleep(ctx context.Context, d time.Duration) error {
	t := time.NewTimer(d)
	defer t.Stop()
	select {
	case <-t.C:
		return nil
	case <-ctx.Done():
		return ctx.Err()
	}
}
