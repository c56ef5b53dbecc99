package replay

import (
	"context"
	"errors"
	"fmt"
	"math"
	"sync"
	"time"

	"livefield/online"
	"livefield/replay/session"
	"livefield/stream/wire"
)

// Practice states, in order.
const (
	PracticeRunning   = "running"   // the block plays; the trainee may stop
	PracticeFinishing = "finishing" // stopped; the rest of the block runs at full speed
	PracticeDone      = "done"      // the Report is complete
)

// PracticeOptions configure a Practice.
type PracticeOptions struct {
	Feed FeedOptions
	// Speed of the playback before the stop (1 is real time; 0 plays at full
	// speed, useful with StopAt only).
	Speed float64
	// StopAt, when positive, stops by itself once the block has run this
	// long (arrival time after the block start), as a scripted trainee.
	StopAt time.Duration
	// From starts part-way through the session (see PlayOptions.From).
	From time.Duration
	// OnDamage is told of damaged spans of the file (they are skipped).
	OnDamage func(*session.CorruptError)
	// Wait is the pacing sleep (a timer when nil); it must return early
	// when its channel argument is closed.
	Wait func(ctx context.Context, d time.Duration, stop <-chan struct{}) error
}

// Practice replays one block with the future hidden and scores the
// trainee's stop. Stop, State, Report and Result may be called from any goroutine;
// Run from one.
type Practice struct {
	opt    PracticeOptions
	feeder *Feeder

	stopOnce sync.Once
	stopCh   chan struct{}

	mu     sync.Mutex
	report *Report
	state  string

	// Written by Run and by the feeder's callbacks, which may run on an
	// HTTP goroutine (a reset from the page); never held while calling the
	// feeder.
	runMu      sync.Mutex
	block      string
	blockStart time.Time
	rule       Moment // when the block rule was first met
	full       Moment // the block's end

	// Owned by Run.
	lastAt time.Time
	stop   Moment // the trainee's stop
}

// NewPractice prepares a practice run.
func NewPractice(opt PracticeOptions) (*Practice, error) {
	if opt.Speed < 0 || math.IsNaN(opt.Speed) {
		return nil, fmt.Errorf("replay: speed %v must be positive", opt.Speed)
	}
	if opt.Speed == 0 && opt.StopAt <= 0 {
		return nil, errors.New("replay: a practice at full speed needs a stop time")
	}
	p := &Practice{opt: opt, stopCh: make(chan struct{}), state: PracticeRunning}
	fo := opt.Feed
	user := fo.OnUpdate
	fo.OnUpdate = func(block string, s *online.Snapshot, at time.Time) {
		p.onUpdate(block, s, at)
		if user != nil {
			user(block, s, at)
		}
	}
	endUser := fo.OnBlockEnd
	fo.OnBlockEnd = func(block string, s *online.Snapshot, at time.Time) {
		p.onBlockEnd(block, s, at)
		if endUser != nil {
			endUser(block, s, at)
		}
	}
	f, err := NewFeeder(fo)
	if err != nil {
		return nil, err
	}
	p.feeder = f
	return p, nil
}

// Source is what the page shows during the practice.
func (p *Practice) Source() *Feeder { return p.feeder }

// Stop is the trainee's decision; later calls do nothing.
func (p *Practice) Stop() { p.stopOnce.Do(func() { close(p.stopCh) }) }

// State is one of PracticeRunning, PracticeFinishing and PracticeDone.
func (p *Practice) State() string {
	p.mu.Lock()
	defer p.mu.Unlock()
	return p.state
}

// Report is the finished report, or nil before it is done.
func (p *Practice) Report() *Report {
	p.mu.Lock()
	defer p.mu.Unlock()
	return p.report
}

// Result is the finished report, or nil before it is done (for
// display.PracticeHandler).
func (p *Practice) Result() any {
	if r := p.Report(); r != nil {
		return r
	}
	return nil
}

func (p *Practice) setState(s string) {
	p.mu.Lock()
	p.state = s
	p.mu.Unlock()
}

func (p *Practice) stopped() bool {
	select {
	case <-p.stopCh:
		return true
	default:
		return false
	}
}

func (p *Practice) onUpdate(block string, s *online.Snapshot, at time.Time) {
	p.runMu.Lock()
	defer p.runMu.Unlock()
	if p.block == "" || block != p.block || p.rule.Snap != nil {
		return
	}
	if s.Summary.Ready {
		p.rule = Moment{s, at.Sub(p.blockStart).Seconds()}
	}
}

func (p *Practice) onBlockEnd(block string, s *online.Snapshot, at time.Time) {
	p.runMu.Lock()
	defer p.runMu.Unlock()
	if p.block != "" && block == p.block && p.full.Snap == nil {
		p.full = Moment{s, at.Sub(p.blockStart).Seconds()}
	}
}

// errBlockDone ends the playback once the practised block has ended.
var errBlockDone = errors.New("replay: block done")

// Run plays r: the first block after opt.From at the chosen speed until
// the stop, then the rest of that block at full speed. It returns the
// report (also kept for Report).
func (p *Practice) Run(ctx context.Context, r *session.Reader, name string) (*Report, error) {
	wait := p.opt.Wait
	if wait == nil {
		wait = sleepUnless
	}
	play := PlayOptions{
		Speed:    p.opt.Speed,
		From:     p.opt.From,
		OnDamage: p.opt.OnDamage,
		Wait: func(ctx context.Context, d time.Duration) error {
			if p.stopped() {
				return nil
			}
			return wait(ctx, d, p.stopCh)
		},
	}
	_, err := Play(ctx, r, play, func(rec session.Record) error {
		p.runMu.Lock()
		block, start := p.block, p.blockStart
		p.runMu.Unlock()
		if block != "" && p.stop.Snap == nil {
			auto := p.opt.StopAt > 0 && rec.At.Sub(start) > p.opt.StopAt
			if auto {
				p.Stop()
			}
			if p.stopped() {
				p.markStop(start, auto)
			}
		}
		ferr := p.feeder.FeedRecord(rec)
		if block == "" && ferr == nil && rec.Subject == wire.SubjectBlock {
			if h := p.feeder.Health(); h.BlockState == "running" {
				p.runMu.Lock()
				p.block, p.blockStart = h.Block, rec.At
				p.runMu.Unlock()
			}
		}
		p.lastAt = rec.At
		p.runMu.Lock()
		done := p.full.Snap != nil
		p.runMu.Unlock()
		if done {
			return errBlockDone
		}
		return nil
	})
	if err != nil && !errors.Is(err, errBlockDone) {
		return nil, err
	}
	p.runMu.Lock()
	block := p.block
	p.runMu.Unlock()
	if block == "" {
		return nil, errors.New("replay: the session has no block to practise on")
	}
	// When the file ends inside the block, its end is the last record.
	p.feeder.Finish()
	p.runMu.Lock()
	defer p.runMu.Unlock()
	if p.full.Snap == nil {
		return nil, fmt.Errorf("replay: block %q did not finish", p.block)
	}
	rep := Score(p.stop, p.full, p.rule)
	rep.State, rep.Session = PracticeDone, name
	p.mu.Lock()
	p.report, p.state = rep, PracticeDone
	p.mu.Unlock()
	return rep, nil
}

// markStop keeps what the trainee saw at the stop. The stop time is StopAt
// for a scripted stop, else the arrival time of the last record shown.
func (p *Practice) markStop(blockStart time.Time, auto bool) {
	p.stop = Moment{p.feeder.Snapshot(), p.lastAt.Sub(blockStart).Seconds()}
	if auto {
		p.stop.S = p.opt.StopAt.Seconds()
	}
	p.setState(PracticeFinishing)
}

func sleepUnless(ctx context.Context, d time.Duration, stop <-chan struct{}) error {
	t := time.NewTimer(d)
	defer t.Stop()
	select {
	case <-t.C:
	case <-stop:
	case <-ctx.Done():
		return ctx.Err()
	}
	return nil
}
