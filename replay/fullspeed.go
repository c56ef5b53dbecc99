package replay

import (
	"context"
	"errors"
	"math"
	"time"

	"livefield/replay/session"
	"livefield/stream/ingest"
)

// FinalOnly, as FeedOptions.UpdateEvery, leaves the estimates alone while
// a block is fed and updates them once when it ends (and at Finish). The
// full-speed passes (replay --speed max, export, the evidence pass) use
// it: nobody watches their intermediate estimates, and the final ones are
// the exact ridge of every bin whatever the grouping of the updates.
const FinalOnly = time.Duration(math.MaxInt64)

// DefaultProgressEvery is the wall-time interval between two progress
// calls of a full-speed pass.
const DefaultProgressEvery = time.Second

// PassOptions configure Feeder.FeedSession.
type PassOptions struct {
	// From starts part-way through the session (see PlayOptions.From).
	From time.Duration
	// OnDamage is told of damaged spans of the file (they are skipped).
	OnDamage func(*session.CorruptError)
	// Progress, when set, is called with the feeder's counts about once per
	// ProgressEvery (DefaultProgressEvery when 0) of wall time: messages
	// and bins fed, not estimate updates.
	Progress      func(ingest.Health)
	ProgressEvery time.Duration
	// Until, when set, is asked after each record; true ends the pass
	// early, without an error.
	Until func() bool
}

// errUntil ends a pass whose Until said so.
var errUntil = errors.New("replay: pass ended by Until")

// FeedSession feeds every record of r to f at full speed, on the caller's
// goroutine. Refused messages are counted in f's stats, not returned: a
// recorded session is played as it was received. It does not Finish the
// last block.
func (f *Feeder) FeedSession(ctx context.Context, r *session.Reader, opt PassOptions) (PlayStats, error) {
	every := opt.ProgressEvery
	if every <= 0 {
		every = DefaultProgressEvery
	}
	next := time.Now().Add(every)
	st, err := Play(ctx, r, PlayOptions{From: opt.From, OnDamage: opt.OnDamage}, func(rec session.Record) error {
		_ = f.FeedRecord(rec) // counted in f.Health
		if opt.Progress != nil {
			if now := time.Now(); now.After(next) {
				next = now.Add(every)
				opt.Progress(f.Health())
			}
		}
		if opt.Until != nil && opt.Until() {
			return errUntil
		}
		return nil
	})
	if errors.Is(err, errUntil) {
		err = nil
	}
	return st, err
}
