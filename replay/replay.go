package replay

import (
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"math"
	"sync"
	"time"

	"livefield/online"
	"livefield/replay/session"
	"livefield/stream/ingest"
	"livefield/stream/wire"
)

// FeedOptions configure a Feeder.
type FeedOptions struct {
	// StimuliDir is where movie files named by a stimulus spec are looked up.
	StimuliDir string
	// Grace is the seconds a bin waits for late spikes
	// (binning.DefaultGrace when 0).
	Grace float64
	// UpdateEvery is the arrival-time interval between estimate updates
	// (ingest.DefaultUpdateEvery, the live cadence, when 0; FinalOnly for
	// none before the block end).
	UpdateEvery time.Duration
	// OnUpdate, when set, is called with the block id, every snapshot the
	// feeder publishes and the arrival time it was made at. It runs with
	// the feeder locked (on the feeding goroutine, or on the goroutine of a
	// Reset or SetCriterion) and must not call the feeder.
	OnUpdate func(block string, s *online.Snapshot, at time.Time)
	// Lambda is the ridge penalty of every block (0: the estimator's
	// default); Evidence chooses it by the evidence at each block end for the
	// later blocks of the same stimulus shape (ingest.Options.Evidence), and
	// EvidenceLambda reports the choice.
	Lambda   float64
	Evidence bool
	// OnBlockEnd, when set, is called likewise with the final snapshot of
	// each block.
	OnBlockEnd func(block string, s *online.Snapshot, at time.Time)
	// OnBin, when set, is called with every bin the block's estimator
	// took (ingest.Options.OnBin).
	OnBin func(block string, m *online.Mapper, frame []float64, counts []online.Count)
	// Pipelined decodes and bins the next messages while the estimator
	// works (ingest.Options.Pipelined): the same estimates, sooner, on two
	// cores. OnUpdate and OnBlockEnd then run on the estimator's goroutine,
	// not under the feeder's lock.
	Pipelined bool
}

// Feeder turns decoded session messages into estimates without NATS: it is
// the live ingest's own loop (ingest.Loop), with the records' arrival
// times as its clock, behind a lock so that the display may call it.
type Feeder struct {
	mu   sync.Mutex // guards loop's feeding side and now
	loop *ingest.Loop
	now  time.Time // arrival of the latest message
}

// discard is the feeder's logger: refusals are counted in Health, and a
// replay reports them itself.
var discard = slog.New(slog.NewTextHandler(io.Discard, nil))

// NewFeeder returns a Feeder with no block running. Its options are
// filled and checked by the ingest (ingest.NewLoop), the one place of
// those rules.
func NewFeeder(opt FeedOptions) (*Feeder, error) {
	l, err := ingest.NewLoop(ingest.Options{
		Prefix:      "replay",
		StimuliDir:  opt.StimuliDir,
		Grace:       opt.Grace,
		UpdateEvery: opt.UpdateEvery,
		Logger:      discard,
		OnUpdate:    opt.OnUpdate,
		OnBlockEnd:  opt.OnBlockEnd,
		OnBin:       opt.OnBin,
		Lambda:      opt.Lambda,
		Evidence:    opt.Evidence,
		Pipelined:   opt.Pipelined,
	})
	if err != nil {
		return nil, fmt.Errorf("replay: %w", err)
	}
	return &Feeder{loop: l}, nil
}

// FeedError is a message the feeder refused; the estimates are unchanged.
type FeedError struct {
	Subject string
	Reason  string // a wire rejection reason or one of ingest's Reason constants
	Err     error
}

func (e *FeedError) Error() string {
	return fmt.Sprintf("replay: %s message refused (%s): %v", e.Subject, e.Reason, e.Err)
}

func (e *FeedError) Unwrap() error { return e.Err }

// Feed applies one message that arrived at at on subject suffix subject
// ("block", "frames", "spikes" or "control"). A refused message is
// returned as a *FeedError and counted. data is not kept.
func (f *Feeder) Feed(subject string, data []byte, at time.Time) error {
	f.mu.Lock()
	defer f.mu.Unlock()
	if at.After(f.now) {
		f.now = at
	}
	err := f.loop.Feed(subject, data, f.now)
	var ie *ingest.Error
	if errors.As(err, &ie) {
		return &FeedError{Subject: ie.Subject, Reason: ie.Reason, Err: ie.Err}
	}
	return err
}

// Close stops the feeder's goroutines (a pipelined feeder's estimator, the
// evidence fits still running) and waits for them. The estimates published
// so far stay readable.
func (f *Feeder) Close() {
	f.mu.Lock()
	defer f.mu.Unlock()
	f.loop.Close()
}

// FeedRecord feeds one session record.
func (f *Feeder) FeedRecord(r session.Record) error { return f.Feed(r.Subject, r.Data, r.At) }

// Finish ends a block still running (as a new block start would) and
// returns the latest snapshot.
func (f *Feeder) Finish() *online.Snapshot {
	f.mu.Lock()
	defer f.mu.Unlock()
	return f.loop.Finish(f.now)
}

// Snapshot is the latest published snapshot (nil before the first block).
func (f *Feeder) Snapshot() *online.Snapshot { return f.loop.Snapshot() }

// Health returns the counters so far (the ingest's, without the NATS
// side). Safe from any goroutine.
func (f *Feeder) Health() ingest.Health { return f.loop.Health() }

// EvidenceLambda waits for the evidence fits of the ended blocks
// (FeedOptions.Evidence) and returns the choice of λ from the named block,
// or from the last block that ended when block is "".
func (f *Feeder) EvidenceLambda(block string) (float64, error) {
	f.loop.WaitEvidence()
	h := f.loop.Health()
	if block == "" {
		block = h.EvidenceBlock
	}
	if lambda, ok := f.loop.EvidenceOf(block); ok {
		return lambda, nil
	}
	why := h.EvidenceError
	if why == "" {
		why = "no block ended"
	}
	return 0, fmt.Errorf("replay: no evidence choice of λ for block %q: %s", block, why)
}

// Reset forgets the running block's estimates.
func (f *Feeder) Reset() {
	f.mu.Lock()
	defer f.mu.Unlock()
	f.loop.Reset()
}

// FlagSTC asks for (or stops) STC on one unit, in this and later blocks.
func (f *Feeder) FlagSTC(id string, on bool) error {
	f.mu.Lock()
	defer f.mu.Unlock()
	return f.loop.FlagSTC(id, on)
}

// SetCriterion changes the target reliability and block fraction; one
// that fails online.Criterion.Check is refused with its error.
func (f *Feeder) SetCriterion(target, fraction float64) error {
	f.mu.Lock()
	defer f.mu.Unlock()
	return f.loop.SetCriterion(target, fraction)
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
