package ingest

import (
	"sync"
	"time"

	"livefield/online"
)

// eventKind is what one event asks of the estimator.
type eventKind uint8

const (
	evBin       eventKind = iota // a closed bin: frame index and counts
	evUnit                       // a new unit id, in the order the intake numbered them
	evStart                      // a block start: the new mapper and its stimulus
	evEnd                        // the running block ended
	evReset                      // forget the running block's estimates
	evFlag                       // ask for or stop STC on a unit
	evCriterion                  // a new block criterion
	evGap                        // the stream paused: restart the lag history
	evSync                       // update now and close done
	evTick                       // a pipelined Loop's arrival clock: update when due
)

// event is one step of the intake's decisions, applied in order by the
// estimator. Counts of a bin live in the queue's flat counts buffer,
// [lo, hi), so that queuing a bin does not allocate.
type event struct {
	kind   eventKind
	frame  int64     // evBin
	lo, hi int       // evBin: its counts
	end    float64   // evBin: the bin's end, seconds of stream time
	at     time.Time // arrival of the message that caused it
	id     string    // evUnit, evFlag
	on     bool      // evFlag
	crit   online.Criterion
	start  *blockStart     // evStart
	done   chan<- struct{} // evSync
}

// blockStart hands a new block's mapper and stimulus to the estimator.
type blockStart struct {
	block  string
	shape  string
	mapper *online.Mapper
	src    frameSource
}

// frameSource is what the estimator needs of a stimulus.
type frameSource interface {
	FrameTo(dst []float64, f int64) error
}

// eventQueue carries events from the intake to the estimator. It is
// unbounded: the intake never waits for the estimator and nothing is
// dropped; a backlog only makes the estimates trail the stream (the
// estimator then folds it in with one exact re-solve). Two pairs of
// buffers are swapped, so steady state does not allocate.
type eventQueue struct {
	mu     sync.Mutex
	events []event
	counts []online.Count
	wake   chan struct{} // one token: something was pushed

	bins   int        // bins queued (not yet taken)
	room   *sync.Cond // signalled by take and close, for waitRoom
	closed bool       // the estimator stopped: waitRoom returns at once
}

func newEventQueue() *eventQueue {
	q := &eventQueue{wake: make(chan struct{}, 1)}
	q.room = sync.NewCond(&q.mu)
	return q
}

// waitRoom waits until at most max bins are queued (a pipelined Loop's
// bound) or the queue is closed.
func (q *eventQueue) waitRoom(max int) {
	q.mu.Lock()
	for q.bins > max && !q.closed {
		q.room.Wait()
	}
	q.mu.Unlock()
}

// close releases waitRoom for good: the estimator will take nothing more.
func (q *eventQueue) close() {
	q.mu.Lock()
	q.closed = true
	q.mu.Unlock()
	q.room.Broadcast()
}

// push appends e, with counts for a bin.
func (q *eventQueue) push(e event, counts []online.Count) {
	q.mu.Lock()
	if e.kind == evBin {
		e.lo = len(q.counts)
		q.counts = append(q.counts, counts...)
		e.hi = len(q.counts)
		q.bins++
	}
	q.events = append(q.events, e)
	q.mu.Unlock()
	select {
	case q.wake <- struct{}{}:
	default:
	}
}

// take returns everything queued and leaves the given (emptied) buffers in
// its place.
func (q *eventQueue) take(events []event, counts []online.Count) ([]event, []online.Count) {
	q.mu.Lock()
	ev, c := q.events, q.counts
	q.events, q.counts = events[:0], counts[:0]
	q.bins = 0
	q.mu.Unlock()
	q.room.Broadcast()
	return ev, c
}
