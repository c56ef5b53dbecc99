package ingest

import (
	"errors"
	"fmt"
	"log/slog"
	"math"
	"time"

	"livefield/online"
	"livefield/stream/binning"
)

// Defaults of Options.
const (
	DefaultMaxUnits    = 4096    // distinct unit ids per block
	DefaultMaxPayload  = 1 << 20 // bytes of one message
	DefaultUpdateEvery = time.Second
	DefaultQueue       = 4096 // messages waiting for the intake goroutine

	// DefaultPendingMsgs and DefaultPendingBytes are the nats.go pending
	// limits of the core-NATS subscription. The reference workload (16×16
	// noise at 60 Hz in 50 ms frame batches, 384 units at 10 spikes/s in
	// 20 ms spike batches) is 70 messages/s and about 110 kB/s (measured by
	// TestReferenceRates). The limits hold 10 s of it at 10× real time (a
	// replay), or 100 s of the live stream: 7000 messages and 11 MB,
	// rounded up. The intake only decodes and bins (estimate updates run
	// on their own goroutine), so it drains the queue far faster than any
	// rig sends; the limits absorb stalls of the whole process.
	DefaultPendingMsgs  = 8192
	DefaultPendingBytes = 16 << 20

	// logEvery is the shortest interval between two log lines for one
	// rejection reason.
	logEvery = 5 * time.Second
	// tickEvery is how often the owner goroutine looks at the clock when
	// no message arrives.
	tickEvery = 50 * time.Millisecond
)

// Options configure one rig's ingest.
type Options struct {
	// Prefix of the subjects, e.g. "livefield.rig1": the ingest reads
	// Prefix+".block", ".frames", ".spikes" and ".control". Required by
	// Start; NewLoop uses it in log lines only.
	Prefix string
	// StimuliDir is where movie files named by a stimulus spec are looked up.
	StimuliDir string
	// Grace is the seconds a bin stays open for late spikes
	// (binning.DefaultGrace).
	Grace float64
	// Lambda is the ridge penalty of every block's estimates; 0 keeps the
	// estimator's default (online.DefaultLambda times the pixel variance).
	Lambda float64
	// Prior sets the smooth-local estimate of every block (its window and
	// evaluation budgets; online.PriorOptions, the zero value its defaults).
	// A larger window holds more of each field, so units turn reliable
	// sooner, at a cost per refit that grows with the window's size cubed.
	Prior online.PriorOptions
	// Evidence, with Lambda 0, chooses the penalty by the evidence
	// (online.Mapper.Evidence) at the end of each block, in the background,
	// and gives it to the later blocks with the same stimulus shape. The fit
	// takes about a minute at 16×16 pixels × 12 lags; it touches nothing but
	// the finished block's estimator and the Loop's guarded state, and one
	// still running when the process ends is abandoned (WaitEvidence waits).
	Evidence bool
	// MaxUnits caps the distinct unit ids of one block (DefaultMaxUnits);
	// a spikes message that would pass it is rejected.
	MaxUnits int
	// MaxPayload rejects larger messages (DefaultMaxPayload bytes).
	MaxPayload int
	// Queue is the capacity of the queue between the NATS callbacks and the
	// intake goroutine (DefaultQueue messages); a full queue makes the
	// callbacks wait, never drop.
	Queue int
	// UpdateEvery is the time between two estimate updates
	// (DefaultUpdateEvery), on the clock Now (a Rig) or on the arrival
	// times given to Loop.Feed.
	UpdateEvery time.Duration
	// Logger receives rate-limited rejection lines (slog.Default when nil).
	Logger *slog.Logger
	// Now is the wall clock (time.Now when nil).
	Now func() time.Time

	// Shard selects the units this ingest maps (all when Count is 0 or 1).
	Shard Shard

	// Durable reads the rig through JetStream: a file-backed stream
	// (StreamConfig) and a durable consumer, acknowledged after the
	// messages are processed, so that nothing sent while this process or
	// its connection is down is lost. Start fails when the server has no
	// JetStream. When false the ingest reads core NATS, where messages sent
	// during a disconnect are lost.
	Durable bool
	// Stream and Consumer name the JetStream stream and durable consumer
	// (StreamName(Prefix) and ConsumerName(Prefix, Shard) when empty).
	Stream, Consumer string
	// Replicas is the stream's replica count when Start creates or updates
	// it (three on a three-server cluster); 0 keeps the count of an existing
	// stream, and 1 for a new one.
	Replicas int

	// PendingMsgs and PendingBytes are the core-NATS subscription's
	// pending limits (DefaultPendingMsgs, DefaultPendingBytes).
	PendingMsgs, PendingBytes int

	// OnUpdate, when set, is called on the estimator's goroutine (the
	// feeding goroutine of a NewLoop) with the block
	// id, every snapshot published and the clock it was made at. It must
	// not call back into the ingest, and should not block: it holds up the
	// estimator (display.Updates.Notify, which pushes the snapshot to the
	// page, never does).
	OnUpdate func(block string, s *online.Snapshot, at time.Time)
	// OnBlockEnd, when set, is called likewise with each block's final
	// snapshot.
	OnBlockEnd func(block string, s *online.Snapshot, at time.Time)
	// OnBin, when set, is called likewise right after the block's mapper
	// took a bin (Mapper.AddBin), with the frame and counts it was given
	// (valid during the call only); the mapper may be read (Bins, Units,
	// UnitID), not changed. The export's Poisson refinement keeps the bins
	// this way.
	OnBin func(block string, m *online.Mapper, frame []float64, counts []online.Count)

	// Pipelined, for NewLoop (a Rig ignores it), runs the estimator on a goroutine of its own
	// while the caller's Feed decodes and bins the next messages (replay
	// at full speed, export). The estimator is still paced by the arrival
	// times, so the estimates are those of the inline estimator, bit for
	// bit; Feed waits while more than PipelineBins bins are queued, so
	// memory stays bounded. OnUpdate and OnBlockEnd then run on the
	// estimator's goroutine; Finish and Update wait for it.
	Pipelined bool
}

// PipelineBins is how many bins a pipelined Loop's Feed lets queue up
// before it waits for the estimator: about a minute of 60 Hz bins, a few
// hundred kilobytes of events.
const PipelineBins = 4096

func (o *Options) fill() error {
	if o.Grace == 0 {
		o.Grace = binning.DefaultGrace
	}
	if !(o.Grace > 0) || math.IsInf(o.Grace, 0) {
		return fmt.Errorf("ingest: Options.Grace %v is not a positive number of seconds", o.Grace)
	}
	if o.Lambda < 0 || math.IsNaN(o.Lambda) || math.IsInf(o.Lambda, 0) {
		return fmt.Errorf("ingest: Options.Lambda %v is not a penalty ≥ 0", o.Lambda)
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
	if o.PendingMsgs == 0 {
		o.PendingMsgs = DefaultPendingMsgs
	}
	if o.PendingBytes == 0 {
		o.PendingBytes = DefaultPendingBytes
	}
	if o.PendingMsgs < 0 || o.PendingBytes < 0 {
		return fmt.Errorf("ingest: Options.PendingMsgs %d, PendingBytes %d: negative", o.PendingMsgs, o.PendingBytes)
	}
	if err := o.Shard.check(); err != nil {
		return err
	}
	if o.Logger == nil {
		o.Logger = slog.Default()
	}
	if o.Now == nil {
		o.Now = time.Now
	}
	return nil
}

// fillNATS also checks and fills what Start needs.
func (o *Options) fillNATS() error {
	if o.Prefix == "" {
		return errors.New("ingest: Options.Prefix is empty")
	}
	if err := o.fill(); err != nil {
		return err
	}
	if o.Stream == "" {
		o.Stream = StreamName(o.Prefix)
	}
	if o.Consumer == "" {
		o.Consumer = ConsumerName(o.Prefix, o.Shard)
	}
	return nil
}
