package ingest

import (
	"context"
	"errors"
	"fmt"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"livefield/stream/wire"
)

// The JetStream stream of one rig, sized for the reference workload
// (70 messages/s, about 110 kB/s; see DefaultPendingMsgs): 12 hours of it
// is about 3 million messages and 4.8 GB. Messages older than StreamMaxAge,
// or past StreamMaxBytes, are discarded oldest first.
const (
	StreamMaxAge   = 12 * time.Hour
	StreamMaxBytes = 6 << 30 // 6 GiB: 15 hours of the reference workload
	StreamMaxMsgs  = 4 << 20 // messages: 16 hours
	// StreamDuplicates is the window in which a publisher's retry with the
	// same Nats-Msg-Id is stored once.
	StreamDuplicates = 2 * time.Minute
)

// The durable consumer of one worker.
const (
	consumerAckWait = 30 * time.Second
	// consumerMaxAckPending bounds the messages delivered but not yet
	// acknowledged: the queue, one pull batch and the acknowledgement
	// stride, with room.
	consumerMaxAckPending = 2 * DefaultQueue
	// consumerInactive deletes a worker's consumer a day after its worker
	// went away (each start recreates it anyway).
	consumerInactive = 24 * time.Hour
	pullBatch        = 512 // messages per pull request
	ackEvery         = 256 // processed messages per acknowledgement (AckAll)
	apiTimeout       = 5 * time.Second
	resyncEvery      = time.Second // retry interval while the server is away
)

// StreamName is the JetStream stream of a rig prefix: the prefix in upper
// case with every byte outside [A-Z0-9_-] written as '_', e.g.
// "livefield.rig1" → "LIVEFIELD_RIG1".
func StreamName(prefix string) string {
	b := []byte(strings.ToUpper(prefix))
	for i, c := range b {
		if !(c >= 'A' && c <= 'Z' || c >= '0' && c <= '9' || c == '_' || c == '-') {
			b[i] = '_'
		}
	}
	return string(b)
}

// ConsumerName is the durable consumer of one worker of a rig, e.g.
// "LIVEFIELD_RIG1_SHARD_0_OF_2" ("…_SHARD_0_OF_1" unsharded).
func ConsumerName(prefix string, sh Shard) string {
	n := max(sh.Count, 1)
	return fmt.Sprintf("%s_SHARD_%d_OF_%d", StreamName(prefix), sh.Index, n)
}

// StreamConfig is the stream Start creates (or updates to) for a rig:
// subjects prefix+".>", file storage, the limits above, one replica (three
// on a cluster: set Replicas before creating it there).
func StreamConfig(name, prefix string) jetstream.StreamConfig {
	return jetstream.StreamConfig{
		Name:        name,
		Description: "livefield rig " + prefix,
		Subjects:    []string{prefix + ".>"},
		Storage:     jetstream.FileStorage,
		Retention:   jetstream.LimitsPolicy,
		Discard:     jetstream.DiscardOld,
		MaxAge:      StreamMaxAge,
		MaxBytes:    StreamMaxBytes,
		MaxMsgs:     StreamMaxMsgs,
		MaxMsgSize:  DefaultMaxPayload,
		Duplicates:  StreamDuplicates,
		Replicas:    1,
	}
}

// HasJetStream reports whether the server behind nc offers JetStream to
// this account. Other failures (no answer) are returned.
func HasJetStream(ctx context.Context, nc *nats.Conn) (bool, error) {
	js, err := jetstream.New(nc)
	if err != nil {
		return false, fmt.Errorf("ingest: %w", err)
	}
	ctx, cancel := context.WithTimeout(ctx, apiTimeout)
	defer cancel()
	_, err = js.AccountInfo(ctx)
	switch {
	case err == nil:
		return true, nil
	case noJetStream(err):
		return false, nil
	}
	return false, fmt.Errorf("ingest: asking the server for JetStream: %w", err)
}

// noJetStream tells the server's "not enabled" answers, and the silence of
// a server without JetStream (no responders), from other failures.
func noJetStream(err error) bool {
	return errors.Is(err, jetstream.ErrJetStreamNotEnabled) || errors.Is(err, jetstream.ErrJetStreamNotEnabledForAccount) ||
		errors.Is(err, nats.ErrNoResponders)
}

// durable is a Rig's JetStream consumption. Messages are processed in
// stream order, each exactly once: the owner goroutine admits only the
// stream sequence after the last one processed, skips (and counts)
// duplicates, and on a gap (messages lost in flight across a server
// restart) recreates the consumer at the first missing sequence.
type durable struct {
	r      *Rig
	js     jetstream.JetStream
	stream jetstream.Stream
	filter string

	mu sync.Mutex // guards cc
	cc jetstream.ConsumeContext

	gen atomic.Uint64 // consumer generation; bumped by the owner

	// Owner goroutine only.
	last       uint64 // stream sequence of the last processed message
	fresh      bool   // the generation's first message is still to come
	unacked    jetstream.Msg
	nUnacked   int
	needResync bool
	nextTry    time.Time

	// Health.
	startSeq  atomic.Uint64
	lastSeq   atomic.Uint64
	pending   atomic.Uint64 // messages in the stream after the last delivered
	dups      atomic.Uint64
	resyncs   atomic.Uint64
	errs      atomic.Uint64
	lastError atomic.Pointer[string]
}

func (r *Rig) startDurable() error {
	js, err := jetstream.New(r.nc)
	if err != nil {
		return fmt.Errorf("ingest: %w", err)
	}
	ctx, cancel := context.WithTimeout(r.ctx, apiTimeout)
	defer cancel()
	cfg := StreamConfig(r.opt.Stream, r.opt.Prefix)
	cfg.Replicas = max(r.opt.Replicas, 1)
	if old, err := js.Stream(ctx, r.opt.Stream); err == nil && r.opt.Replicas == 0 {
		cfg.Replicas = old.CachedInfo().Config.Replicas // never scale a replicated stream down by default
	}
	st, err := js.CreateOrUpdateStream(ctx, cfg)
	if noJetStream(err) {
		return errors.New("ingest: the NATS server has no JetStream; run on core NATS instead (messages sent during a disconnect are then lost)")
	}
	if err != nil {
		return fmt.Errorf("ingest: stream %s for %s.>: %w", r.opt.Stream, r.opt.Prefix, err)
	}
	d := &durable{r: r, js: js, stream: st, filter: r.opt.Prefix + ".>"}
	start, err := d.blockStart(ctx)
	if err != nil {
		return err
	}
	d.last, d.fresh = start-1, true
	d.startSeq.Store(start)
	if err := d.consume(ctx, start); err != nil {
		return err
	}
	r.dur = d
	return nil
}

// blockStart is the stream sequence to rebuild the state from: the last
// message on prefix.block when it is a block start (the running block is
// replayed from its start), the message after it when it is an end, and
// the next message to be stored when there is none.
func (d *durable) blockStart(ctx context.Context) (uint64, error) {
	info, err := d.stream.Info(ctx)
	if err != nil {
		return 0, fmt.Errorf("ingest: stream %s: %w", d.r.opt.Stream, err)
	}
	next := info.State.LastSeq + 1
	m, err := d.stream.GetLastMsgForSubject(ctx, wire.Subject(d.r.opt.Prefix, wire.SubjectBlock))
	if errors.Is(err, jetstream.ErrMsgNotFound) {
		return next, nil
	}
	if err != nil {
		return 0, fmt.Errorf("ingest: last block message of stream %s: %w", d.r.opt.Stream, err)
	}
	if b, err := wire.DecodeBlock(m.Data); err == nil && b.Kind == wire.KindEnd {
		return m.Sequence + 1, nil
	}
	return m.Sequence, nil
}

// consume replaces the consumer by one that delivers from stream sequence
// start on.
func (d *durable) consume(ctx context.Context, start uint64) error {
	name := d.r.opt.Consumer
	if err := d.stream.DeleteConsumer(ctx, name); err != nil && !errors.Is(err, jetstream.ErrConsumerNotFound) {
		return fmt.Errorf("ingest: removing consumer %s: %w", name, err)
	}
	cons, err := d.stream.CreateConsumer(ctx, jetstream.ConsumerConfig{
		Durable:           name,
		Description:       "livefield ingest, shard " + d.r.opt.Shard.String(),
		DeliverPolicy:     jetstream.DeliverByStartSequencePolicy,
		OptStartSeq:       start,
		AckPolicy:         jetstream.AckAllPolicy,
		AckWait:           consumerAckWait,
		MaxDeliver:        -1,
		MaxAckPending:     consumerMaxAckPending,
		FilterSubject:     d.filter,
		InactiveThreshold: consumerInactive,
	})
	if err != nil {
		return fmt.Errorf("ingest: consumer %s at sequence %d: %w", name, start, err)
	}
	gen := d.gen.Add(1)
	cc, err := cons.Consume(func(msg jetstream.Msg) { d.deliver(msg, gen) },
		jetstream.PullMaxMessages(pullBatch),
		jetstream.ConsumeErrHandler(func(_ jetstream.ConsumeContext, err error) { d.fail(err) }))
	if err != nil {
		return fmt.Errorf("ingest: consuming %s: %w", name, err)
	}
	d.mu.Lock()
	d.cc = cc
	d.mu.Unlock()
	return nil
}

func (d *durable) fail(err error) {
	d.errs.Add(1)
	s := err.Error()
	d.lastError.Store(&s)
}

// deliver runs on the consumer's delivery goroutine. It waits for room in
// the queue (the server keeps what is not pulled yet), so nothing is
// dropped here.
func (d *durable) deliver(msg jetstream.Msg, gen uint64) {
	r := d.r
	md, err := msg.Metadata()
	subj := msg.Subject()
	if err != nil || len(subj) <= len(r.opt.Prefix) {
		return
	}
	d.pending.Store(md.NumPending)
	m := message{subj: subjectOf(subj[len(r.opt.Prefix)+1:]), data: msg.Data(), at: r.opt.Now(),
		js: msg, seq: md.Sequence.Stream, gen: gen}
	r.received[m.subj].Add(1)
	select {
	case r.in <- m:
	case <-r.ctx.Done():
	}
}

// admit says whether the owner processes m: the next message in stream
// order of the current consumer.
func (d *durable) admit(m message) bool {
	if m.gen != d.gen.Load() || d.needResync {
		return false // delivered by a consumer since replaced
	}
	switch {
	case m.seq == d.last+1, d.fresh && m.seq > d.last:
		d.fresh = false
		return true
	case m.seq <= d.last:
		// Processed before: its acknowledgement was lost. Acknowledging it
		// now (all up to it) ends its redeliveries.
		d.dups.Add(1)
		if m.js != nil {
			_ = m.js.Ack()
		}
		return false
	}
	d.needResync = true
	d.retry()
	return false
}

// processed acknowledges (every ackEvery messages, and on each tick) what
// the owner has applied.
func (d *durable) processed(m message) {
	d.last = m.seq
	d.lastSeq.Store(m.seq)
	d.unacked = m.js
	if d.nUnacked++; d.nUnacked >= ackEvery {
		d.ack()
	}
}

// ack acknowledges every message processed so far (AckAll); one that
// could not be sent is tried again on the next tick. One lost on the way
// only means a redelivery after the consumer's ack wait, which admit skips
// and acknowledges.
func (d *durable) ack() {
	if d.unacked != nil && d.unacked.Ack() == nil {
		d.unacked, d.nUnacked = nil, 0
	}
}

// retry recreates the consumer after the last processed message, at most
// once per resyncEvery while the server does not answer.
func (d *durable) retry() {
	if !d.needResync {
		return
	}
	now := time.Now()
	if now.Before(d.nextTry) {
		return
	}
	d.stopConsuming()
	d.gen.Add(1) // what the old consumer still delivers is discarded
	ctx, cancel := context.WithTimeout(d.r.ctx, apiTimeout)
	defer cancel()
	if err := d.consume(ctx, d.last+1); err != nil {
		d.fail(err)
		d.nextTry = now.Add(resyncEvery)
		return
	}
	d.needResync, d.fresh = false, true
	d.unacked, d.nUnacked = nil, 0
	d.resyncs.Add(1)
}

func (d *durable) stopConsuming() {
	d.mu.Lock()
	defer d.mu.Unlock()
	if d.cc != nil {
		d.cc.Stop()
		d.cc = nil
	}
}
