package ingest

import (
	"maps"
	"math"
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
	ReasonBadBin        = "bad-bin"            // a bin the estimator refused (a movie frame with a non-finite pixel)
	ReasonSubject       = "unknown-subject"    // a subject under the prefix that is none of the four
)

// Health is a copy of the counters of a rig (Rig.Health) or of a Loop fed
// without NATS (Loop.Health, replay.Feeder.Health), safe to encode and
// keep: the one counters type of the ingest, served as /api/health. The
// NATS fields stay empty in a Loop's.
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
	// Queue is the messages waiting for the intake goroutine now. The
	// NATS callbacks wait for room rather than drop: past the queue, nats.go
	// holds messages up to its pending limits (SlowConsumer beyond).
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
	// Rejected counts rejected messages (and bins the estimator refused) by
	// reason.
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

	Bins        uint64 `json:"bins"`        // bins in the published estimates
	LateSpikes  uint64 `json:"late_spikes"` // spikes that arrived after their bin had closed
	HeldFrames  uint64 `json:"held_frames"` // bins whose frame was held over from the one before
	SpikesTotal uint64 `json:"spikes"`      // spikes accepted
	Resets      uint64 `json:"resets"`      // estimate resets
	Updates     uint64 `json:"updates"`     // snapshots published
	// UpdateSeconds is the time the last estimate update took (process
	// time, not the injected clock).
	UpdateSeconds float64 `json:"update_s"`
	// UpdateEvery is the time between two updates, seconds: the budget of
	// one update.
	UpdateEvery float64 `json:"update_every_s"`
	// Route is how the last update folded its bins: a block RLS update
	// ("woodbury") when few had queued, one exact re-solve from the Gram
	// matrix ("resolve") when many had (catching up).
	Route      string       `json:"route,omitempty"`
	LastUpdate string       `json:"last_update"` // RFC 3339, wall clock
	StreamTime online.Float `json:"stream_t"`    // latest spike or frame time seen (null before any)
	BinTime    online.Float `json:"bin_t"`       // end of the latest bin closed
	// EstimateTime is the end of the latest bin in the published estimates,
	// and BinsWaiting the bins closed but not in them yet.
	EstimateTime online.Float `json:"estimate_t"`
	BinsWaiting  uint64       `json:"bins_waiting"`
	// IdleSpikes are spikes received while no block ran (not mapped).
	IdleSpikes uint64 `json:"idle_spikes"`
	// StreamLag is StreamTime minus EstimateTime: how far, in seconds of
	// stream, the published estimates trail the data received (at least the
	// grace). It grows while the estimator catches up with a backlog.
	StreamLag online.Float `json:"stream_lag_s"`
	// Lag is the wall time from the arrival of the message that closed the
	// first bin of the latest update to that update: how long closed bins
	// wait before readers see them (at most about UpdateEvery).
	Lag online.Float `json:"lag_s"`
}

// Health returns a copy of the counters. Safe from any goroutine.
func (c *Loop) Health() Health {
	h := Health{Prefix: c.opt.Prefix, Shard: c.opt.Shard.String(), UpdateEvery: c.opt.UpdateEvery.Seconds()}
	c.mu.Lock()
	h.Rejected = maps.Clone(c.rejected)
	b := c.block
	c.mu.Unlock()
	h.Block, h.BlockState, h.RejectedBlock, h.BlockError = b.block, b.state, b.rejected, b.err
	n := &c.n
	h.Processed = n.processed.Load()
	h.Blocks = n.blocks.Load()
	h.SpikesTotal = n.spikes.Load()
	h.IdleSpikes = n.idleSpikes.Load()
	h.OtherShardSpikes = n.otherShard.Load()
	h.Resets = n.resets.Load()
	h.LateSpikes, h.HeldFrames = n.late.Load(), n.held.Load()
	h.Units = int(n.units.Load())
	h.StreamTime = online.Float(n.streamTime())
	h.BinTime = online.Float(math.Float64frombits(n.binT.Load()))

	e := c.estimates.Load()
	h.Updates = e.Updates
	h.UpdateSeconds = e.UpdateSeconds
	h.LastUpdate = stamp(e.LastUpdate)
	h.EstimateTime = online.Float(e.EstimateT)
	h.Route = e.Route
	h.Bins = e.Bins - e.Refused
	h.BinsWaiting = n.bins.Load() - e.Bins
	h.Lag = online.Float(e.Wait)
	// How far the published estimates trail the data received.
	h.StreamLag = online.Float(n.streamTime() - e.EstimateT)

	f := &c.fits
	f.mu.Lock()
	h.EvidenceRunning, h.EvidenceLambda, h.EvidenceBlock, h.EvidenceError = f.running, online.Float(f.lambda), f.block, f.errorMsg
	f.mu.Unlock()
	return h
}

// Health returns a copy of the counters, with the NATS side's. Safe from
// any goroutine.
func (r *Rig) Health() Health {
	h := r.core.Health()
	h.Messages = make(map[string]uint64, nSubjects)
	for i := range nSubjects {
		h.Messages[subjectNames[i]] = r.received[i].Load()
	}
	h.Queue = len(r.in)
	h.SlowConsumer = int(r.slowDrops.Load())
	if r.sub != nil {
		if n, err := r.sub.Dropped(); err == nil {
			h.SlowConsumer = n
		}
	}
	h.SlowConsumerEvents = r.slowEvents.Load()
	if r.dur == nil {
		h.Warning = CoreWarning
	}
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
