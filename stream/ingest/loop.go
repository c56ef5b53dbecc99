package ingest

import (
	"context"
	"fmt"
	"math"
	"sync"
	"sync/atomic"
	"time"

	"livefield/online"
)

// Loop is the NATS-free core of one rig's ingest. Its intake (the message
// path) decodes and bins the messages given to Feed, in the order given,
// and queues the closed bins; its estimator folds them into the running
// block's online.Mapper and publishes a snapshot at most once per
// UpdateEvery. NewLoop runs the estimator inline, on the caller's goroutine
// (replay and export: deterministic, paced by the arrival times given to
// Feed); Start runs it on a goroutine of its own (live: the message path
// never waits for an update).
//
// Feed, Advance, Update, Finish, Reset, FlagSTC and SetCriterion must be
// called from one goroutine at a time (the feeder's). Snapshot, Health and
// EvidenceOf may be called from any goroutine.
type Loop struct {
	opt Options

	in  intake
	est estimator
	q   *eventQueue
	// async: the estimator runs on its own goroutine (a Rig's, or a
	// pipelined Loop's); paced: it updates on the arrival clock carried by
	// evTick events, as an inline one does (a pipelined Loop's).
	async, paced bool
	ctx          context.Context
	stop         context.CancelFunc
	wg           sync.WaitGroup

	snap      atomic.Pointer[online.Snapshot]
	estimates atomic.Pointer[estimates]
	n         counts
	fits      fitter

	mu       sync.Mutex           // guards block, rejected and logged
	block    blockState           // the running block, for Health
	rejected map[string]uint64    // rejected messages and bins by reason
	logged   map[string]time.Time // last log line per reason
}

// blockState names the running block and the last refused start.
type blockState struct {
	block, state  string
	rejected, err string
}

// counts are the intake's running tallies, readable from any goroutine.
type counts struct {
	processed, blocks, bins, spikes atomic.Uint64
	idleSpikes, otherShard, resets  atomic.Uint64
	late, held                      atomic.Uint64
	units                           atomic.Int64
	streamT, binT                   atomic.Uint64 // float64 bits; NaN before any
}

func (n *counts) init() {
	n.streamT.Store(math.Float64bits(math.NaN()))
	n.binT.Store(math.Float64bits(math.NaN()))
}

// seen notes the latest spike or frame time of the stream.
func (n *counts) seen(t float64) {
	if old := math.Float64frombits(n.streamT.Load()); math.IsNaN(old) || t > old {
		n.streamT.Store(math.Float64bits(t))
	}
}

func (n *counts) streamTime() float64 { return math.Float64frombits(n.streamT.Load()) }

// NewLoop returns a Loop with no block running, whose estimator runs
// inline. Options.Prefix may be empty; the NATS settings (Durable, Stream,
// Consumer, Pending…) are not used. Close ends its background fits.
func NewLoop(opt Options) (*Loop, error) {
	if err := opt.fill(); err != nil {
		return nil, err
	}
	return newLoop(opt, false), nil
}

// newLoop returns a Loop whose estimator runs on a goroutine of its own
// keeping wall-clock time (rig, a Rig's), or else inline, or with
// opt.Pipelined on a goroutine of its own paced by the arrival clock.
func newLoop(opt Options, rig bool) *Loop {
	paced := !rig && opt.Pipelined
	c := &Loop{opt: opt, async: rig || paced, paced: paced, q: newEventQueue(),
		rejected: map[string]uint64{}, logged: map[string]time.Time{}}
	c.n.init()
	c.estimates.Store(&estimates{EstimateT: math.NaN(), Wait: math.NaN()})
	c.in.init(c, c.q)
	c.est.init(c)
	c.fits.init(c)
	c.ctx, c.stop = context.WithCancel(context.Background())
	if c.async {
		c.wg.Add(1)
		go func() {
			defer c.wg.Done()
			defer c.q.close()
			c.est.run(c.ctx, c.q, !c.paced)
		}()
	}
	return c
}

// Close stops the estimator goroutine (a Rig's), the running block's
// background fits and the evidence fits still running, and waits for all
// of them. It may be called more than once.
func (c *Loop) Close() {
	c.stop()
	c.wg.Wait()
	if c.est.mapper != nil {
		c.est.mapper.Close() // the running block's background prior fits
	}
	c.fits.close()
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
	err := c.in.handle(message{subj: subj, data: data, at: at})
	c.settle(at)
	if err != nil {
		name := subject
		if subj != subjOther {
			name = subjectNames[subj]
		}
		return &Error{Subject: name, Reason: reasonOf(err), Err: err}
	}
	return nil
}

// handle runs one message through the intake (a Rig's intake goroutine);
// refusals are counted there.
func (c *Loop) handle(m message) { _ = c.in.handle(m) }

// processed is the number of messages the intake has handled.
func (c *Loop) processed() uint64 { return c.n.processed.Load() }

// settle lets an inline estimator catch up with the intake and update when
// due; a pipelined Loop's estimator gets the clock as an event (and the
// feeding goroutine waits while too many bins are queued); a Rig's
// estimator keeps time by itself.
func (c *Loop) settle(now time.Time) {
	switch {
	case !c.async:
		c.est.drain(c.q)
		c.est.maybeUpdate(now)
	case c.paced:
		c.q.push(event{kind: evTick, at: now}, nil)
		c.q.waitRoom(PipelineBins)
	}
}

// Advance runs an update when UpdateEvery has passed on the clock now,
// without a message (a clock tick).
func (c *Loop) Advance(now time.Time) {
	c.in.tick(now)
	c.settle(now)
}

// Update folds every bin closed so far into the estimates now and returns
// the snapshot it publishes.
func (c *Loop) Update(now time.Time) *online.Snapshot {
	c.in.tick(now)
	c.sync(now)
	return c.Snapshot()
}

// sync queues an update after everything queued so far and waits for it.
func (c *Loop) sync(now time.Time) {
	done := make(chan struct{})
	c.q.push(event{kind: evSync, at: now, done: done}, nil)
	if !c.async {
		c.est.drain(c.q)
		return
	}
	select {
	case <-done:
	case <-c.ctx.Done():
	}
}

// Finish ends a block still running, as a new block start would, and
// returns the latest snapshot once the estimator has folded everything in.
func (c *Loop) Finish(at time.Time) *online.Snapshot {
	c.in.tick(at)
	if c.in.binner != nil {
		c.in.endBlock(math.Inf(1), at)
	}
	c.sync(at)
	return c.Snapshot()
}

// Reset forgets the estimates of the running block (the electrode moved);
// units stay registered and the stream goes on.
func (c *Loop) Reset() {
	c.in.reset(c.in.clock)
	c.settle(c.in.clock)
}

// FlagSTC asks for (or stops) spike-triggered covariance on one unit, in
// the running block and the blocks after it.
func (c *Loop) FlagSTC(id string, on bool) error {
	c.in.flagSTC(id, on, c.in.clock)
	c.settle(c.in.clock)
	return nil
}

// SetCriterion changes the target reliability and the block fraction, for
// the running block and the blocks after it. A criterion that fails
// online.Criterion.Check is refused with its error and changes nothing.
func (c *Loop) SetCriterion(target, fraction float64) error {
	if err := c.in.setCriterion(online.Criterion{Target: target, Fraction: fraction}, c.in.clock); err != nil {
		return err
	}
	c.settle(c.in.clock)
	return nil
}

// Snapshot is the latest published update (nil before the first block's
// first update). Safe from any goroutine.
func (c *Loop) Snapshot() *online.Snapshot { return c.snap.Load() }

// setBlock edits the block state under the lock.
func (c *Loop) setBlock(f func(*blockState)) {
	c.mu.Lock()
	f(&c.block)
	c.mu.Unlock()
}

// reject counts one rejected message (or bin) and logs it, at most once
// per reason per logEvery. Safe from any goroutine.
func (c *Loop) reject(reason string, err error) {
	c.mu.Lock()
	c.rejected[reason]++
	n := c.rejected[reason]
	c.mu.Unlock()
	c.logRejection(reason, n, err)
}

// logRejection logs one line for reason unless one was logged less than
// logEvery ago.
func (c *Loop) logRejection(reason string, count uint64, err error) {
	now := c.opt.Now()
	c.mu.Lock()
	last, seen := c.logged[reason]
	quiet := seen && now.Sub(last) < logEvery
	if !quiet {
		c.logged[reason] = now
	}
	c.mu.Unlock()
	if !quiet {
		c.opt.Logger.Warn("ingest: message rejected", "prefix", c.opt.Prefix, "reason", reason, "count", count, "err", err)
	}
}

// lambdaFor is the penalty for a block of this stimulus shape: the one
// given, else the evidence choice of an earlier block of the same shape,
// else 0 (the estimator's default).
func (c *Loop) lambdaFor(shape string) float64 {
	if c.opt.Lambda > 0 || !c.opt.Evidence {
		return c.opt.Lambda
	}
	return c.fits.forShape(shape)
}

// WaitEvidence waits for the evidence fits still running.
func (c *Loop) WaitEvidence() { c.fits.wg.Wait() }

// EvidenceOf is the evidence choice of λ from the named block, once its fit
// has finished (WaitEvidence); ok is false when there is none.
func (c *Loop) EvidenceOf(block string) (lambda float64, ok bool) {
	c.fits.mu.Lock()
	defer c.fits.mu.Unlock()
	lambda, ok = c.fits.byBlock[block]
	return lambda, ok
}

// String names the loop in log lines.
func (c *Loop) String() string { return fmt.Sprintf("ingest loop %q", c.opt.Prefix) }
