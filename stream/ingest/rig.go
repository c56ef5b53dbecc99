package ingest

import (
	"context"
	"errors"
	"fmt"
	"sync"
	"sync/atomic"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"livefield/online"
)

// CoreWarning is the health warning of an ingest on core NATS.
const CoreWarning = "core NATS: messages sent during a disconnect are lost"

// Subjects, relative to the prefix.
const (
	subjBlock = iota
	subjFrames
	subjSpikes
	subjControl
	subjOther // any other subject under the prefix
	nSubjects
)

var subjectNames = [nSubjects]string{"block", "frames", "spikes", "control", "other"}

type message struct {
	subj int
	data []byte
	at   time.Time // arrival, by Options.Now

	// JetStream only.
	js  jetstream.Msg
	seq uint64 // stream sequence
	gen uint64 // consumer generation it was delivered by
}

// Rig is the live ingest of one rig: a Loop fed from NATS by one owner
// goroutine, which owns one online.Mapper per running block and publishes
// an immutable Snapshot once per UpdateEvery.
type Rig struct {
	opt  Options
	core *Loop
	nc   *nats.Conn
	sub  *nats.Subscription // core NATS
	dur  *durable           // JetStream, nil on core NATS

	in   chan message
	cmds chan func()
	ctx  context.Context
	stop context.CancelFunc
	wg   sync.WaitGroup
	once sync.Once

	// Counted by the NATS callbacks.
	received [nSubjects]atomic.Uint64

	slowDrops  int           // owner: nats.go drops already seen
	slowEvents atomic.Uint64 // slow-consumer episodes seen by the owner
}

// Start subscribes to the rig's subjects on nc and starts the owner
// goroutine. With Options.Durable it first creates or reuses the rig's
// JetStream stream and (re)creates its durable consumer at the start of the
// current block (see the package doc). The ingest runs until ctx is done or
// Close is called; nc stays the caller's.
func Start(ctx context.Context, nc *nats.Conn, opt Options) (*Rig, error) {
	if nc == nil {
		return nil, errors.New("ingest: nil NATS connection")
	}
	if err := opt.fillNATS(); err != nil {
		return nil, err
	}
	r := &Rig{
		opt:  opt,
		core: newLoop(opt),
		nc:   nc,
		in:   make(chan message, opt.Queue),
		cmds: make(chan func()),
	}
	r.ctx, r.stop = context.WithCancel(ctx)
	if opt.Durable {
		if err := r.startDurable(); err != nil {
			r.stop()
			return nil, err
		}
	} else {
		if err := r.subscribe(); err != nil {
			r.stop()
			return nil, err
		}
	}
	r.wg.Add(1)
	go r.run()
	return r, nil
}

func (r *Rig) subscribe() error {
	r.core.health.Warning = CoreWarning
	// One subscription covers the four subjects, so that the messages of
	// one publisher reach the owner goroutine in the order it sent them (a
	// block start before the block's frames); nats.go delivers each
	// subscription on its own goroutine, so four would lose that order.
	sub, err := r.nc.Subscribe(r.opt.Prefix+".*", r.deliver)
	if err != nil {
		return fmt.Errorf("ingest: subscribing to %s.*: %w", r.opt.Prefix, err)
	}
	r.sub = sub
	if err := sub.SetPendingLimits(r.opt.PendingMsgs, r.opt.PendingBytes); err != nil {
		r.unsubscribe()
		return fmt.Errorf("ingest: pending limits: %w", err)
	}
	if err := r.nc.Flush(); err != nil {
		r.unsubscribe()
		return fmt.Errorf("ingest: subscribing on %s: %w", r.opt.Prefix, err)
	}
	return nil
}

// Prefix is the rig's subject prefix.
func (r *Rig) Prefix() string { return r.opt.Prefix }

// deliver runs on the subscription's NATS delivery goroutine: it never
// waits longer than enqueueWait, and counts what it drops.
func (r *Rig) deliver(msg *nats.Msg) {
	subj := subjectOf(msg.Subject[len(r.opt.Prefix)+1:])
	r.received[subj].Add(1)
	m := message{subj: subj, data: msg.Data, at: r.opt.Now()}
	select {
	case r.in <- m:
		return
	default:
	}
	t := time.NewTimer(enqueueWait)
	defer t.Stop()
	select {
	case r.in <- m:
	case <-t.C:
		r.core.queueDrop.Add(1)
	case <-r.ctx.Done():
	}
}

func (r *Rig) unsubscribe() {
	if r.sub != nil {
		_ = r.sub.Unsubscribe()
	}
}

func subjectOf(name string) int {
	for i, n := range subjectNames[:subjOther] {
		if n == name {
			return i
		}
	}
	return subjOther
}

// Close unsubscribes (or stops consuming and acknowledges what was
// processed), stops the owner goroutine and waits for it. It may be called
// more than once and from any goroutine.
func (r *Rig) Close() error {
	r.once.Do(func() {
		r.core.mu.Lock()
		r.core.health.closing = true
		r.core.mu.Unlock()
		r.unsubscribe()
		if r.dur != nil {
			r.do(r.dur.ack)
			r.dur.stopConsuming()
		}
		r.stop()
		r.wg.Wait()
	})
	return nil
}

func (r *Rig) run() {
	defer r.wg.Done()
	tick := time.NewTicker(tickEvery)
	defer tick.Stop()
	for {
		select {
		case <-r.ctx.Done():
			return
		case m := <-r.in:
			r.take(m)
		case f := <-r.cmds:
			f()
		case <-tick.C:
			r.onTick()
		}
		r.core.st.maybeUpdate(r.opt.Now())
	}
}

// take handles one queued message on the owner goroutine.
func (r *Rig) take(m message) {
	if r.dur == nil {
		_ = r.core.st.handle(m)
		return
	}
	if r.dur.admit(m) {
		_ = r.core.st.handle(m)
		r.dur.processed(m)
	}
}

// onTick acknowledges processed JetStream messages, retries a pending
// resynchronisation and notices slow-consumer episodes.
func (r *Rig) onTick() {
	if r.dur != nil {
		r.dur.ack()
		r.dur.retry()
		return
	}
	if n, err := r.sub.Dropped(); err == nil && n > r.slowDrops {
		r.slowEvents.Add(1)
		r.core.logRejection("slow-consumer", uint64(n), fmt.Errorf("ingest: nats.go dropped %d messages: the subscription's pending limits (%d messages, %d bytes) were exceeded", n-r.slowDrops, r.opt.PendingMsgs, r.opt.PendingBytes))
		r.slowDrops = n
	}
}

// do runs f on the owner goroutine and waits for it; false once closed.
func (r *Rig) do(f func()) bool {
	done := make(chan struct{})
	select {
	case r.cmds <- func() { f(); close(done) }:
	case <-r.ctx.Done():
		return false
	}
	select {
	case <-done:
		return true
	case <-r.ctx.Done():
		return false
	}
}

// Snapshot is the latest published update (nil before the first block's
// first update). Safe from any goroutine.
func (r *Rig) Snapshot() *online.Snapshot { return r.core.Snapshot() }

// Sync processes every message already queued, runs an update now and
// returns its snapshot. Tests and the end of a replay use it to avoid
// waiting for the next UpdateEvery.
func (r *Rig) Sync() *online.Snapshot {
	r.do(func() {
		for {
			select {
			case m := <-r.in:
				r.take(m)
				continue
			default:
			}
			break
		}
		r.core.st.update(r.opt.Now())
		if r.dur != nil {
			r.dur.ack()
		}
	})
	return r.Snapshot()
}

// Reset forgets the estimates of the running block (the electrode moved);
// units stay registered and the stream goes on.
func (r *Rig) Reset() { r.do(r.core.Reset) }

// FlagSTC asks for (or stops) spike-triggered covariance on one unit of the
// running block.
func (r *Rig) FlagSTC(id string, on bool) error {
	var err error
	if !r.do(func() { err = r.core.FlagSTC(id, on) }) {
		return errors.New("ingest: closed")
	}
	return err
}

// SetCriterion changes the target reliability and the block fraction, for
// the running block and the blocks after it.
func (r *Rig) SetCriterion(target, fraction float64) error {
	if !(target > 0 && target < 1) || !(fraction > 0 && fraction <= 1) {
		return fmt.Errorf("ingest: criterion target %v, fraction %v out of range", target, fraction)
	}
	var err error
	if !r.do(func() { err = r.core.SetCriterion(target, fraction) }) {
		return errors.New("ingest: closed")
	}
	return err
}

// reject counts one rejected message and logs it, at most once per reason
// per logEvery. Called on the feeding goroutine.
func (c *Loop) reject(reason string, err error) {
	c.mu.Lock()
	c.health.Rejected[reason]++
	n := c.health.Rejected[reason]
	c.mu.Unlock()
	c.logRejection(reason, n, err)
}

// logRejection logs one line for reason unless one was logged less than
// logEvery ago. Called on the feeding goroutine.
func (c *Loop) logRejection(reason string, count uint64, err error) {
	now := c.opt.Now()
	if last, seen := c.logged[reason]; seen && now.Sub(last) < logEvery {
		return
	}
	c.logged[reason] = now
	c.opt.Logger.Warn("ingest: message rejected", "prefix", c.opt.Prefix, "reason", reason, "count", count, "err", err)
}
