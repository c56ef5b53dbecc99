package ingest

import (
	"maps"
	"time"

	"livefield/online"
)

// Rejection reasons raised by the ingest itself; the wire decoders add
// their own (wire.Error.Reason).
const (
	ReasonMalformed     = "malformed"          // a decode error without a wire reason
	ReasonNoBlock       = "no-block"           // frames while no block runs
	ReasonUnknownBlock  = "unknown-block"      // frames or block end naming another block
	ReasonBlockRejected = "block-rejected"     // frames of a block whose start was rejected
	ReasonBadStimulus   = "bad-stimulus"       // block start whose stimulus cannot be opened
	ReasonBadConfig     = "bad-config"         // block start whose settings the mapper refuses
	ReasonFrameRange    = "frame-out-of-range" // a bin's frame index outside the stimulus
	ReasonBadFrames     = "bad-frames"         // frames the binner refuses (time running backwards, …)
	ReasonUnitCap       = "unit-cap"           // spikes that would pass Options.MaxUnits
	ReasonUnknownCmd    = "unknown-command"    // a control command the ingest does not know
	ReasonQueueFull     = "queue-full"         // dropped before decoding: the owner fell behind
	ReasonSubject       = "unknown-subject"    // a subject under the prefix that is none of the four
)

// Health is a copy of a rig's counters, safe to encode and keep.
type Health struct {
	Prefix string `json:"prefix"`
	// NATS connection state, from nats.go.
	Connection string `json:"connection"` // CONNECTED, RECONNECTING, CLOSED, …
	Reconnects uint64 `json:"reconnects"`
	LastError  string `json:"last_error,omitempty"`
	// Messages received per subject (block, frames, spikes, control).
	Messages map[string]uint64 `json:"messages"`
	// Processed is the messages the owner goroutine has handled (accepted
	// or rejected), over all subjects.
	Processed uint64 `json:"processed"`
	// SlowConsumer is the messages nats.go dropped because the
	// subscription's pending limits were exceeded (core NATS), and
	// SlowConsumerEvents the episodes of it seen (one per tick of the owner
	// goroutine at most).
	SlowConsumer       int    `json:"slow_consumer_drops"`
	SlowConsumerEvents uint64 `json:"slow_consumer_events"`
	// Queue is the messages waiting for the owner goroutine now.
	Queue int `json:"queue"`

	// Durable is true when the ingest reads a JetStream stream; Warning
	// says what is at risk otherwise.
	Durable bool   `json:"durable"`
	Warning string `json:"warning,omitempty"`
	// JetStream only: the stream and durable consumer, the stream sequence
	// consumption (re)started at and the last one processed, the messages
	// stored after the last delivered one, redeliveries skipped, consumer
	// recreations after a gap, and consumer errors.
	Stream      string `json:"stream,omitempty"`
	Consumer    string `json:"consumer,omitempty"`
	StartSeq    uint64 `json:"start_seq,omitempty"`
	StreamSeq   uint64 `json:"stream_seq,omitempty"`
	Backlog     uint64 `json:"backlog,omitempty"`
	Duplicates  uint64 `json:"duplicates"`
	Resyncs     uint64 `json:"resyncs"`
	JSErrors    uint64 `json:"jetstream_errors"`
	JSLastError string `json:"jetstream_last_error,omitempty"`

	// Shard is this worker's share of the units, "i/n"; OtherShardSpikes
	// the spikes of other shards' units, ignored (not rejected).
	Shard            string `json:"shard"`
	OtherShardSpikes uint64 `json:"other_shard_spikes"`
	// Rejected counts rejected messages by reason; QueueFull ones included.
	Rejected map[string]uint64 `json:"rejected"`

	Block      string `json:"block"`
	BlockState string `json:"block_state"` // "" (none yet), running, ended
	// RejectedBlock and BlockError name the last block start that was
	// rejected and say why (a broken stimulus spec, a missing movie, …).
	RejectedBlock string `json:"rejected_block,omitempty"`
	BlockError    string `json:"block_error,omitempty"`
	Blocks        uint64 `json:"blocks"`
	Units         int    `json:"units"`

	// The evidence choice of λ (Options.Evidence): the block whose fit is
	// running, the last result and the block it came from, an error.
	EvidenceRunning string       `json:"evidence_running,omitempty"`
	EvidenceLambda  online.Float `json:"evidence_lambda"`
	EvidenceBlock   string       `json:"evidence_block,omitempty"`
	EvidenceError   string       `json:"evidence_error,omitempty"`

	Bins        uint64 `json:"bins"`        // bins given to the mapper
	LateSpikes  uint64 `json:"late_spikes"` // spikes that arrived after their bin had closed
	HeldFrames  uint64 `json:"held_frames"` // bins whose frame was held over from the one before
	SpikesTotal uint64 `json:"spikes"`      // spikes accepted
	Resets      uint64 `json:"resets"`      // estimate resets
	Updates     uint64 `json:"updates"`     // snapshots published
	// UpdateSeconds is the time the last estimate update took (process
	// time, not the injected clock).
	UpdateSeconds float64      `json:"update_s"`
	LastUpdate    string       `json:"last_update"` // RFC 3339, wall clock
	StreamTime    online.Float `json:"stream_t"`    // latest spike or frame time seen (null before any)
	BinTime       online.Float `json:"bin_t"`       // end of the latest bin given to the mapper
	// IdleSpikes are spikes received while no block ran (not mapped).
	IdleSpikes uint64 `json:"idle_spikes"`
	// StreamLag is StreamTime minus BinTime: how far the estimates trail
	// the data received (at least the grace).
	StreamLag online.Float `json:"stream_lag_s"`
	// Lag is the wall time from the arrival of the message that closed the
	// first bin of the latest update to that update: how long closed bins
	// wait before readers see them (at most about UpdateEvery).
	Lag online.Float `json:"lag_s"`

	closing bool
}

// Health returns a copy of the counters. Safe from any goroutine.
func (c *Loop) Health() any { return c.Counters() }

// Counters is Health with its concrete type.
func (c *Loop) Counters() Health {
	c.mu.Lock()
	h := c.health
	h.Rejected = maps.Clone(c.health.Rejected)
	c.mu.Unlock()
	h.Prefix = c.opt.Prefix
	h.Processed = c.processed.Load()
	if n := c.queueDrop.Load(); n > 0 {
		h.Rejected[ReasonQueueFull] += n
	}
	return h
}

// Health returns a copy of the counters. Safe from any goroutine.
func (r *Rig) Health() any { return r.Counters() }

// Counters is Health with its concrete type.
func (r *Rig) Counters() Health {
	h := r.core.Counters()
	h.Messages = make(map[string]uint64, nSubjects)
	for i := range nSubjects {
		h.Messages[subjectNames[i]] = r.received[i].Load()
	}
	h.Queue = len(r.in)
	if r.sub != nil && !h.closing {
		if n, err := r.sub.Dropped(); err == nil {
			h.SlowConsumer = n
		}
	}
	h.SlowConsumerEvents = r.slowEvents.Load()
	if d := r.dur; d != nil {
		h.Durable = true
		h.Stream, h.Consumer = r.opt.Stream, r.opt.Consumer
		h.StartSeq, h.StreamSeq, h.Backlog = d.startSeq.Load(), d.lastSeq.Load(), d.pending.Load()
		h.Duplicates, h.Resyncs, h.JSErrors = d.dups.Load(), d.resyncs.Load(), d.errs.Load()
		if s := d.lastError.Load(); s != nil {
			h.JSLastError = *s
		}
	}
	h.Connection = r.nc.Status().String()
	h.Reconnects = r.nc.Stats().Reconnects
	if err := r.nc.LastError(); err != nil {
		h.LastError = err.Error()
	}
	return h
}

func stamp(t time.Time) string {
	if t.IsZero() {
		return ""
	}
	return t.UTC().Format(time.RFC3339Nano)
}
