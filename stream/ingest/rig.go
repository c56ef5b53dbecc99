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

// Rig is the live ingest of one rig: NATS callbacks hand messages to the
// intake goroutine (decode and bin: the message path), which queues the
// closed bins for the estimator goroutine (the running block's
// online.Mapper, an immutable Snapshot at most once per UpdateEvery).
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

	slowDrops  atomic.Int64  // nats.go drops seen by the intake
	slowEvents atomic.Uint64 // slow-consumer episodes seen by the intake
}

// Start subscribes to the rig's subjects on nc and starts the intake and
// estimator goroutines. With Options.Durable it first creates or reuses
// the rig's JetStream stream and (re)creates its durable consumer at the
// start of the current block (see the package doc). The ingest runs until
// ctx is done or Close is called; nc stays the caller's.
func Start(ctx context.Context, nc *nats.Conn, opt Options) (*Rig, error) {
	if nc == nil {
		return nil, errors.New("ingest: nil NATS connection")
	}
	if err := opt.fillNATS(); err != nil {
		return nil, err
	}
	r := &Rig{
		opt:  opt,
		core: newLoop(opt, true),
		nc:   nc,
		in:   make(chan message, opt.Queue),
		cmds: make(chan func()),
	}
	r.ctx, r.stop = context.WithCancel(ctx)
	if opt.Durable {
		if err := r.startDurable(); err != nil {
			r.stop()
			r.core.Close()
			return nil, err
		}
	} else {
		if err := r.subscribe(); err != nil {
			r.stop()
			r.core.Close()
			return nil, err
		}
	}
	r.wg.Add(1)
	go r.run()
	return r, nil
}

func (r *Rig) subscribe() error {
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

// deliver runs on the subscription's NATS delivery goroutine. It waits
// for room in the queue rather than drop: the intake only decodes and bins,
// so the queue drains fast, and while it is full nats.go holds the messages
// up to its pending limits (beyond them it drops and counts: the slow
// consumer, reported in Health).
func (r *Rig) deliver(msg *nats.Msg) {
	subj := subjectOf(msg.Subject[len(r.opt.Prefix)+1:])
	r.received[subj].Add(1)
	select {
	case r.in <- message{subj: subj, data: msg.Data, at: r.opt.Now()}:
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
// processed), stops the intake and estimator goroutines and the evidence
// fits, and waits for them. It may be called more than once and from any
// goroutine.
func (r *Rig) Close() error {
	r.once.Do(func() {
		r.unsubscribe()
		if r.dur != nil {
			r.do(r.dur.ack)
			r.dur.stopConsuming()
		}
		r.stop()
		r.wg.Wait()
		r.core.Close()
	})
	return nil
}

// run is the intake goroutine.
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
	}
}

// take handles one queued message on the intake goroutine.
func (r *Rig) take(m message) {
	if r.dur == nil {
		r.core.handle(m)
		return
	}
	if r.dur.admit(m) {
		r.core.handle(m)
		r.dur.processed(m)
	}
}

// onTick acknowledges processed JetStream messages, retries a pending
// resynchronisation and notices slow-consumer episodes.
func (r *Rig) onTick() {
	r.core.Advance(r.opt.Now())
	if r.dur != nil {
		r.dur.ack()
		r.dur.retry()
		return
	}
	n, err := r.sub.Dropped()
	if old := int(r.slowDrops.Load()); err == nil && n > old {
		r.slowEvents.Add(1)
		r.core.logRejection("slow-consumer", uint64(n), fmt.Errorf("ingest: nats.go dropped %d messages: the subscription's pending limits (%d messages, %d bytes) were exceeded", n-old, r.opt.PendingMsgs, r.opt.PendingBytes))
		r.slowDrops.Store(int64(n))
	}
}

// do runs f on the intake goroutine and waits for it; false once closed.
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

// Sync processes every message already queued, waits for the estimator to
// fold in every bin closed so far, and returns the snapshot of that update.
// Tests and the end of a replay use it.
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
		if r.dur != nil {
			r.dur.ack()
		}
	})
	r.core.sync(r.opt.Now())
	return r.Snapshot()
}

// WaitProcessed waits until the intake has handled n messages or ctx is
// done, and reports whether it got there.
func (r *Rig) WaitProcessed(ctx context.Context, n uint64) bool {
	t := time.NewTicker(tickEvery / 5)
	defer t.Stop()
	for r.core.processed() < n {
		select {
		case <-ctx.Done():
			return false
		case <-t.C:
		}
	}
	return true
}

// Reset forgets the estimates of the running block (the electrode moved);
// units stay registered and the stream goes on.
func (r *Rig) Reset() { r.do(r.core.Reset) }

// FlagSTC asks for (or stops) spike-triggered covariance on one unit of the
// running block and the blocks after it.
func (r *Rig) FlagSTC(id string, on bool) error {
	if !r.do(func() { _ = r.core.FlagSTC(id, on) }) {
		return errors.New("ingest: closed")
	}
	return nil
}

// SetCriterion changes the target reliability and the block fraction, for
// the running block and the blocks after it. A criterion that fails
// online.Criterion.Check is refused with its error and changes nothing.
func (r *Rig) SetCriterion(target, fraction float64) error {
	var err error
	if !r.do(func() {
		err = r.core.SetCriterion(target, fraction)
	}) {
		return errors.New("ingest: closed")
	}
	return err
}
