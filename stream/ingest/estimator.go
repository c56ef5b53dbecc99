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

// estimator owns the running block's online.Mapper. It applies the
// intake's events in order (new units, bins, block starts and ends,
// controls) and updates the estimates at most once per UpdateEvery.
//
// In a Rig it runs on its own goroutine, so that the message path (decode,
// bin, queue) never waits for an update: while an update runs, bins queue
// up, and the next update folds them all in. The mapper chooses how (a
// block RLS update for a few bins, one exact re-solve from the Gram matrix
// for many), so the estimates are always the exact ridge of the bins folded
// so far and only their freshness depends on the load. In a Loop fed by a
// replay it runs inline on the feeding goroutine.
type estimator struct {
	c *Loop

	block  string
	shape  string
	mapper *online.Mapper
	src    frameSource
	frame  []float64

	clock      time.Time // latest arrival or tick applied
	lastUpdate time.Time
	dirty      bool      // bins folded since the last update
	waitSince  time.Time // arrival of the oldest bin not yet in an update
	binEnd     float64   // end of the last bin added to the mapper
	bins       uint64    // bins added, all blocks
	refused    uint64    // bins the mapper refused, all blocks

	// Swapped with the queue's buffers.
	events []event
	counts []online.Count
}

// estimates are the estimator's counters, published once per update.
type estimates struct {
	Updates       uint64
	UpdateSeconds float64
	LastUpdate    time.Time
	Bins          uint64  // bins handled by the published update (added or refused), all blocks
	Refused       uint64  // of those, bins the mapper refused
	EstimateT     float64 // end of the last bin in them (NaN before any)
	Wait          float64 // seconds the oldest of their bins waited (NaN when none)
	Route         string  // how the last update folded its bins (online.SolveInfo)
	Units         int
}

func (e *estimator) init(c *Loop) {
	e.c = c
	e.binEnd = math.NaN()
}

// run applies events as they come and updates on time, until ctx is done.
// Ticks wake it when no event comes, so that updates stay on time.
// With wall false (a pipelined Loop) it keeps no time of its own: the
// evTick events carry the arrival clock.
func (e *estimator) run(ctx context.Context, q *eventQueue, wall bool) {
	var ticks <-chan time.Time
	if wall {
		tick := time.NewTicker(tickEvery)
		defer tick.Stop()
		ticks = tick.C
	}
	for {
		select {
		case <-ctx.Done():
			return
		case <-q.wake:
		case <-ticks:
		}
		e.drain(q)
		if wall {
			e.maybeUpdate(e.c.opt.Now())
		}
	}
}

// drain applies every event queued so far.
func (e *estimator) drain(q *eventQueue) {
	e.events, e.counts = q.take(e.events, e.counts)
	for i := range e.events {
		ev := &e.events[i]
		e.apply(ev, e.counts[ev.lo:ev.hi])
		*ev = event{} // drop references for the collector
	}
}

func (e *estimator) tick(t time.Time) {
	if t.After(e.clock) {
		e.clock = t
	}
}

// apply carries out one event.
func (e *estimator) apply(ev *event, counts []online.Count) {
	e.tick(ev.at)
	switch ev.kind {
	case evBin:
		e.addBin(ev, counts)
	case evUnit:
		if e.mapper != nil {
			e.mapper.Unit(ev.id)
		}
	case evStart:
		if e.mapper != nil {
			e.endBlock(ev.at)
		}
		s := ev.start
		e.block, e.shape, e.mapper, e.src = s.block, s.shape, s.mapper, s.src
		cfg := s.mapper.Config()
		e.frame = make([]float64, cfg.Width*cfg.Height)
		e.binEnd, e.dirty = math.NaN(), false
		// The start's (empty) estimates count as its first update.
		e.lastUpdate = ev.at
		e.publish(e.mapper.Update(), ev.at, 0, true)
	case evEnd:
		if e.mapper != nil {
			e.endBlock(ev.at)
		}
	case evReset:
		if e.mapper != nil {
			e.mapper.Reset()
			e.dirty = false
			e.publish(e.mapper.Update(), ev.at, 0, false)
		}
	case evFlag:
		if e.mapper != nil {
			e.mapper.FlagSTC(ev.id, ev.on)
		}
	case evCriterion:
		if e.mapper != nil {
			// Checked by the intake; the mapper checks again.
			if err := e.mapper.SetCriterion(ev.crit.Target, ev.crit.Fraction); err == nil {
				e.update(ev.at)
			}
		}
	case evGap:
		if e.mapper != nil {
			e.mapper.RestartLags()
		}
	case evSync:
		if e.mapper != nil {
			e.update(e.clock)
		}
		close(ev.done)
	case evTick:
		e.maybeUpdate(ev.at)
	}
}

// addBin gives one closed bin to the mapper. A bin the mapper refuses (a
// movie frame with a non-finite pixel) is counted and logged; the mapper
// restarts its lag history after it, so no later bin is regressed on it.
func (e *estimator) addBin(ev *event, counts []online.Count) {
	if e.mapper == nil {
		return
	}
	err := e.src.FrameTo(e.frame, ev.frame)
	if err != nil {
		e.mapper.RestartLags() // AddBin does so itself when it refuses a bin
	} else {
		err = e.mapper.AddBin(e.frame, counts)
	}
	if err != nil {
		e.refused++
		e.c.reject(ReasonBadBin, fmt.Errorf("ingest: bin of frame %d refused: %w", ev.frame, err))
		return
	}
	if f := e.c.opt.OnBin; f != nil {
		f(e.block, e.mapper, e.frame, counts)
	}
	e.bins++
	e.binEnd = ev.end
	if !e.dirty {
		e.waitSince = ev.at
		e.dirty = true
	}
}

func (e *estimator) maybeUpdate(now time.Time) {
	e.tick(now)
	if e.mapper != nil && e.clock.Sub(e.lastUpdate) >= e.c.opt.UpdateEvery {
		e.update(e.clock)
	}
}

// update folds the new bins into the estimates and publishes a snapshot.
func (e *estimator) update(now time.Time) {
	e.lastUpdate = now
	if e.mapper == nil {
		return
	}
	wait := math.NaN()
	if e.dirty {
		wait = now.Sub(e.waitSince).Seconds()
	}
	t0 := time.Now()
	s := e.mapper.Update()
	e.dirty = false
	e.publish(s, now, time.Since(t0).Seconds(), true)
	st := e.c.estimates.Load()
	if !math.IsNaN(wait) {
		cp := *st
		cp.Wait = wait
		e.c.estimates.Store(&cp)
	}
}

// publish stores s for readers, with the estimator's counters; counted
// says whether it counts as an update.
func (e *estimator) publish(s *online.Snapshot, at time.Time, took float64, counted bool) {
	if s == nil {
		return
	}
	if s.Block == "" {
		cp := *s
		cp.Block = e.block
		s = &cp
	}
	old := e.c.estimates.Load()
	st := &estimates{
		Updates:       old.Updates,
		UpdateSeconds: took,
		LastUpdate:    at,
		Bins:          e.bins + e.refused,
		Refused:       e.refused,
		EstimateT:     e.binEnd,
		Wait:          old.Wait,
		Route:         s.Solve.Route,
		Units:         e.mapper.Units(),
	}
	if counted {
		st.Updates++
	}
	e.c.estimates.Store(st)
	e.c.snap.Store(s)
	if f := e.c.opt.OnUpdate; f != nil {
		f(e.block, s, at)
	}
}

// endBlock publishes the block's final update and lets the mapper go (to
// the evidence fit, when asked for).
func (e *estimator) endBlock(at time.Time) {
	e.update(at)
	e.mapper.Close() // stops the mapper's background prior fits
	if f := e.c.opt.OnBlockEnd; f != nil {
		f(e.block, e.c.snap.Load(), at)
	}
	if e.c.opt.Evidence && e.c.opt.Lambda == 0 {
		e.c.fits.evidence(e.block, e.shape, e.mapper)
	}
	e.mapper, e.src = nil, nil
}

// fitter runs the evidence choice of λ for finished blocks in the
// background, under a context that Close cancels; Close waits for them.
type fitter struct {
	c      *Loop
	ctx    context.Context
	cancel context.CancelFunc
	wg     sync.WaitGroup
	closed atomic.Bool

	mu       sync.Mutex
	byShape  map[string]float64 // evidence λ by stimulus shape (stimulusShape)
	byBlock  map[string]float64 // evidence λ by block id
	running  string
	lambda   float64
	block    string
	errorMsg string
}

func (f *fitter) init(c *Loop) {
	f.c = c
	f.ctx, f.cancel = context.WithCancel(context.Background())
	f.byShape, f.byBlock = map[string]float64{}, map[string]float64{}
	f.lambda = math.NaN()
}

// evidence chooses λ by the evidence from a finished block's mapper, in
// its own goroutine: the mapper is no longer fed, so the goroutine owns it.
// The fit itself cannot be interrupted (one large eigen-decomposition);
// after Close its result is dropped.
func (f *fitter) evidence(block, shape string, m *online.Mapper) {
	if f.closed.Load() {
		return
	}
	f.mu.Lock()
	f.running = block
	f.mu.Unlock()
	f.wg.Add(1)
	go func() {
		defer f.wg.Done()
		lambda, _, err := m.Evidence()
		f.mu.Lock()
		defer f.mu.Unlock()
		f.running = ""
		if f.ctx.Err() != nil {
			return
		}
		if err != nil || !(lambda > 0) || math.IsInf(lambda, 0) {
			f.errorMsg = fmt.Sprintf("block %s: %v (λ = %v)", block, err, lambda)
			return
		}
		f.byShape[shape] = lambda
		f.byBlock[block] = lambda
		f.lambda, f.block, f.errorMsg = lambda, block, ""
		f.c.opt.Logger.Info("ingest: evidence choice of the ridge penalty", "block", block, "lambda", lambda)
	}()
}

// forShape is the evidence λ of an earlier block of this shape, or 0.
func (f *fitter) forShape(shape string) float64 {
	f.mu.Lock()
	defer f.mu.Unlock()
	return f.byShape[shape]
}

// close cancels the fits and waits for them.
func (f *fitter) close() {
	f.closed.Store(true)
	f.cancel()
	f.wg.Wait()
}
