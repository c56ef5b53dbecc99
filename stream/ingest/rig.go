package ingest

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"sync"
	"sync/atomic"
	"time"

	"github.com/nats-io/nats.go"

	"livefield/online"
)

// Defaults of Options.
const (
	DefaultGrace       = 0.25    // seconds a bin stays open for late spikes
	DefaultMaxUnits    = 4096    // distinct unit ids per block
	DefaultMaxPayload  = 1 << 20 // bytes of one message
	DefaultUpdateEvery = time.Second
	DefaultQueue       = 4096 // messages waiting for the owner goroutine
	// logEvery is the shortest interval between two log lines for one
	// rejection reason.
	logEvery = 5 * time.Second
	// enqueueWait is how long a NATS callback waits for room in the queue
	// before it drops the message and counts it.
	enqueueWait = 200 * time.Millisecond
	// tickEvery is how often the owner goroutine looks at the clock when
	// no message arrives.
	tickEvery = 50 * time.Millisecond
)

// Options configure one rig's ingest.
type Options struct {
	// Prefix of the subjects, e.g. "livefield.rig1": the ingest reads
	// Prefix+".block", ".frames", ".spikes" and ".control" (one
	// subscription to Prefix+".*"). Required.
	Prefix string
	// StimuliDir is where movie files named by a stimulus spec are looked up.
	StimuliDir string
	// Grace is the seconds a bin stays open for late spikes (DefaultGrace).
	Grace float64
	// MaxUnits caps the distinct unit ids of one block (DefaultMaxUnits);
	// a spikes message that would pass it is rejected.
	MaxUnits int
	// MaxPayload rejects larger messages (DefaultMaxPayload bytes).
	MaxPayload int
	// Queue is the capacity of the queue between the NATS callbacks and the
	// owner goroutine (DefaultQueue messages).
	Queue int
	// UpdateEvery is the wall time between two estimate updates
	// (DefaultUpdateEvery), measured with Now.
	UpdateEvery time.Duration
	// Logger receives rate-limited rejection lines (slog.Default when nil).
	Logger *slog.Logger
	// Now is the wall clock (time.Now when nil).
	Now func() time.Time
}

func (o *Options) fill() error {
	if o.Prefix == "" {
		return errors.New("ingest: Options.Prefix is empty")
	}
	if o.Grace == 0 {
		o.Grace = DefaultGrace
	}
	if !(o.Grace > 0) || math.IsInf(o.Grace, 0) {
		return fmt.Errorf("ingest: Options.Grace %v is not a positive number of seconds", o.Grace)
	}
	if o.MaxUnits == 0 {
		o.MaxUnits = DefaultMaxUnits
	}
	if o.MaxUnits < 0 {
		return fmt.Errorf("ingest: Options.MaxUnits %d is negative", o.MaxUnits)
	}
	if o.MaxPayload == 0 {
		o.MaxPayload = DefaultMaxPayload
	}
	if o.MaxPayload < 0 {
		return fmt.Errorf("ingest: Options.MaxPayload %d is negative", o.MaxPayload)
	}
	if o.Queue == 0 {
		o.Queue = DefaultQueue
	}
	if o.Queue < 0 {
		return fmt.Errorf("ingest: Options.Queue %d is negative", o.Queue)
	}
	if o.UpdateEvery == 0 {
		o.UpdateEvery = DefaultUpdateEvery
	}
	if o.UpdateEvery < 0 {
		return fmt.Errorf("ingest: Options.UpdateEvery %v is negative", o.UpdateEvery)
	}
	if o.Logger == nil {
		o.Logger = slog.Default()
	}
	if o.Now == nil {
		o.Now = time.Now
	}
	return nil
}

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
}

// Rig is the live ingest of one rig: it owns one online.Mapper per running
// block and publishes an immutable Snapshot once per UpdateEvery.
type Rig struct {
	opt Options
	nc  *nats.Conn
	sub *nats.Subscription

	in   chan message
	cmds chan func()
	ctx  context.Context
	stop context.CancelFunc
	wg   sync.WaitGroup
	once sync.Once

	snap atomic.Pointer[online.Snapshot]

	// Counted by the NATS callbacks.
	received  [nSubjects]atomic.Uint64
	queueDrop atomic.Uint64
	processed atomic.Uint64 // messages handled by the owner goroutine

	mu     sync.Mutex // guards health, written by the owner goroutine
	health Health

	logged map[string]time.Time // last log line per reason; owner goroutine only

	loop loop // owned by the owner goroutine
}

// Start subscribes to the rig's four subjects on nc and starts the owner
// goroutine. The ingest runs until ctx is done or Close is called; nc stays
// the caller's.
func Start(ctx context.Context, nc *nats.Conn, opt Options) (*Rig, error) {
	if nc == nil {
		return nil, errors.New("ingest: nil NATS connection")
	}
	if err := opt.fill(); err != nil {
		return nil, err
	}
	r := &Rig{
		opt:    opt,
		nc:     nc,
		in:     make(chan message, opt.Queue),
		cmds:   make(chan func()),
		logged: map[string]time.Time{},
	}
	r.health.Rejected = map[string]uint64{}
	nan := online.Float(math.NaN()) // unknown until the first update; JSON null
	r.health.StreamTime, r.health.BinTime, r.health.StreamLag, r.health.Lag = nan, nan, nan, nan
	r.loop.init(r)
	r.ctx, r.stop = context.WithCancel(ctx)
	// One subscription covers the four subjects, so that the messages of
	// one publisher reach the owner goroutine in the order it sent them (a
	// block start before the block's frames); nats.go delivers each
	// subscription on its own goroutine, so four would lose that order.
	sub, err := nc.Subscribe(opt.Prefix+".*", r.deliver)
	if err != nil {
		r.stop()
		return nil, fmt.Errorf("ingest: subscribing to %s.*: %w", opt.Prefix, err)
	}
	r.sub = sub
	if err := nc.Flush(); err != nil {
		r.unsubscribe()
		r.stop()
		return nil, fmt.Errorf("ingest: subscribing on %s: %w", opt.Prefix, err)
	}
	r.wg.Add(1)
	go r.run()
	return r, nil
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
		r.queueDrop.Add(1)
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

// Close unsubscribes, stops the owner goroutine and waits for it. It may be
// called more than once and from any goroutine.
func (r *Rig) Close() error {
	r.once.Do(func() {
		r.mu.Lock()
		r.health.closing = true
		r.mu.Unlock()
		r.unsubscribe()
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
			r.loop.handle(m)
		case f := <-r.cmds:
			f()
		case <-tick.C:
		}
		r.loop.maybeUpdate()
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
func (r *Rig) Snapshot() *online.Snapshot { return r.snap.Load() }

// Sync processes every message already queued, runs an update now and
// returns its snapshot. Tests and the end of a replay use it to avoid
// waiting for the next UpdateEvery.
func (r *Rig) Sync() *online.Snapshot {
	r.do(func() {
		for {
			select {
			case m := <-r.in:
				r.loop.handle(m)
				continue
			default:
			}
			break
		}
		r.loop.update()
	})
	return r.Snapshot()
}

// Reset forgets the estimates of the running block (the electrode moved);
// units stay registered and the stream goes on.
func (r *Rig) Reset() { r.do(r.loop.reset) }

// FlagSTC asks for (or stops) spike-triggered covariance on one unit of the
// running block.
func (r *Rig) FlagSTC(id string, on bool) error {
	var err error
	if !r.do(func() { err = r.loop.flagSTC(id, on) }) {
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
	if !r.do(func() { err = r.loop.setCriterion(target, fraction) }) {
		return errors.New("ingest: closed")
	}
	return err
}

// reject counts one rejected message and logs it, at most once per reason
// per logEvery. Called on the owner goroutine.
func (r *Rig) reject(reason string, err error) {
	r.mu.Lock()
	r.health.Rejected[reason]++
	n := r.health.Rejected[reason]
	r.mu.Unlock()
	r.logRejection(reason, n, err)
}

// logRejection logs one line for reason unless one was logged less than
// logEvery ago. Called on the owner goroutine.
func (r *Rig) logRejection(reason string, count uint64, err error) {
	now := r.opt.Now()
	if last, seen := r.logged[reason]; seen && now.Sub(last) < logEvery {
		return
	}
	r.logged[reason] = now
	r.opt.Logger.Warn("ingest: message rejected", "prefix", r.opt.Prefix, "reason", reason, "count", count, "err", err)
}
