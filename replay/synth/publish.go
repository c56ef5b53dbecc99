package synth

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"time"

	"github.com/nats-io/nats.go"

	"livefield/stream/stimulus"
	"livefield/stream/wire"
)

// PublishOptions shape how Publish behaves like a rig. Zero fields take the
// defaults given beside them.
type PublishOptions struct {
	Block    string         // block id (default "B1")
	Stimulus stimulus.Spec  // announced in the block start; Type is required
	Geometry *wire.Geometry // announced in the block start when set
	// Duration is the acquisition time to publish, in seconds (default 60).
	Duration float64
	// FirstFrame is the stimulus frame number shown in the first bin.
	FirstFrame int64
	// Frame onsets go out in batches every FrameBatch of acquisition time
	// (default 50 ms), spikes every SpikeBatch (default 20 ms).
	FrameBatch, SpikeBatch time.Duration
	// A batch leaves FrameDelay (default 5 ms) or SpikeDelay (default
	// 40 ms) after it closes, plus a uniform jitter in ±Jitter (default
	// 10 ms; negative: none), never before it closes, and never before the
	// previous batch of its subject.
	FrameDelay, SpikeDelay, Jitter time.Duration
	// HoldRate is the chance per frame that the stimulus computer misses a
	// refresh: the frame on screen stays for one more refresh, no onset is
	// sent for it, and the stimulus index does not advance (default
	// 1/2000; negative: never).
	HoldRate float64
	// Speed scales the pacing: 1 is real time, 10 ten times faster; ≤ 0
	// sends as fast as possible.
	Speed float64
	// Now and Sleep are the clock (default the wall clock). Sleep is
	// called only when Speed > 0.
	Now   func() time.Time
	Sleep func(time.Duration)
}

// Defaults of PublishOptions.
const (
	DefaultBlock      = "B1"
	DefaultDuration   = 60.0
	DefaultFrameBatch = 50 * time.Millisecond
	DefaultSpikeBatch = 20 * time.Millisecond
	DefaultFrameDelay = 5 * time.Millisecond
	DefaultSpikeDelay = 40 * time.Millisecond
	DefaultJitter     = 10 * time.Millisecond
	DefaultHoldRate   = 1.0 / 2000
	// maxBatch caps the spikes of one message, well below wire.DefaultMaxSize.
	maxBatch = 20000
)

func (o *PublishOptions) fill() error {
	if o.Block == "" {
		o.Block = DefaultBlock
	}
	if o.Stimulus.Type == "" {
		return errors.New("synth: publish: stimulus spec without type")
	}
	if o.Duration == 0 {
		o.Duration = DefaultDuration
	}
	if !(o.Duration > 0) || math.IsInf(o.Duration, 0) {
		return fmt.Errorf("synth: publish: duration %g s", o.Duration)
	}
	if o.FirstFrame < 0 {
		return errors.New("synth: publish: negative first frame")
	}
	durs := []*time.Duration{&o.FrameBatch, &o.SpikeBatch, &o.FrameDelay, &o.SpikeDelay, &o.Jitter}
	defs := []time.Duration{DefaultFrameBatch, DefaultSpikeBatch, DefaultFrameDelay, DefaultSpikeDelay, DefaultJitter}
	for i, d := range durs {
		if *d == 0 {
			*d = defs[i]
		}
	}
	if o.Jitter < 0 {
		o.Jitter = 0
	}
	if o.FrameBatch < 0 || o.SpikeBatch < 0 || o.FrameDelay < 0 || o.SpikeDelay < 0 {
		return errors.New("synth: publish: negative batch period or delay")
	}
	if o.HoldRate == 0 {
		o.HoldRate = DefaultHoldRate
	}
	if o.HoldRate >= 1 || math.IsNaN(o.HoldRate) {
		return fmt.Errorf("synth: publish: hold rate %g not below 1", o.HoldRate)
	}
	if o.Now == nil {
		o.Now = time.Now
	}
	return nil
}

// outbound is one message waiting for its send time (acquisition seconds).
type outbound struct {
	at      float64
	subject string
	data    []byte
}

// publisher holds the state of one Publish call.
type publisher struct {
	ctx    context.Context
	nc     *nats.Conn
	opt    PublishOptions
	wall0  time.Time
	t0     float64
	jitter *rand.Rand

	frames, spikes       []outbound // send queues, each in send order
	lastFrame, lastSpike float64    // last send time per subject
}

// Publish plays the cortex r to NATS under prefix as a rig would: the block start,
// frame onsets and spikes in batches on their subjects with their delays,
// then the block end. The acquisition clock starts at the scenario's Start.
// It paces messages by opt.Speed against opt.Now and opt.Sleep, and stops
// early when ctx ends, after sending what it holds and the block end. It
// flushes the connection before returning.
func Publish(ctx context.Context, nc *nats.Conn, prefix string, r *Cortex, opt PublishOptions) error {
	if nc == nil || r == nil {
		return errors.New("synth: publish: nil connection or rig")
	}
	if err := opt.fill(); err != nil {
		return err
	}
	stim, err := json.Marshal(opt.Stimulus)
	if err != nil {
		return fmt.Errorf("synth: publish: %w", err)
	}
	sc := r.Scenario()
	p := &publisher{
		ctx: ctx, nc: nc, opt: opt, wall0: opt.Now(), t0: sc.Start,
		jitter: rand.New(rand.NewPCG(sc.Seed, 0x9a11)),
	}
	startMsg := wire.Block{Kind: wire.KindStart, Block: opt.Block, T: sc.Start, Stimulus: stim,
		Lags: sc.Lags, FramePeriod: sc.FramePeriod, Geometry: opt.Geometry}
	data, err := wire.EncodeBlock(startMsg)
	if err != nil {
		return fmt.Errorf("synth: publish: %w", err)
	}
	if err := nc.Publish(wire.Subject(prefix, wire.SubjectBlock), data); err != nil {
		return fmt.Errorf("synth: publish: %w", err)
	}
	frameSubj := wire.Subject(prefix, wire.SubjectFrames)
	spikeSubj := wire.Subject(prefix, wire.SubjectSpikes)

	dt := sc.FramePeriod
	bins := int64(math.Round(opt.Duration / dt))
	fb, sb := opt.FrameBatch.Seconds(), opt.SpikeBatch.Seconds()
	var (
		fr        wire.Frames
		sp        wire.Spikes
		frameNext = 1 // index of the next frame batch to close
		spikeNext = 1
		index     = opt.FirstFrame
		now       = sc.Start
		stopped   error
	)
	fr.Block = opt.Block
	emit := func(u string, t float64) {
		sp.Unit = append(sp.Unit, u)
		sp.T = append(sp.T, t)
	}
	for k := int64(0); k < bins; k++ {
		if err := ctx.Err(); err != nil {
			stopped = err
			break
		}
		start := sc.Start + float64(k)*dt
		end := sc.Start + float64(k+1)*dt
		held := k > 0 && opt.HoldRate > 0 && p.jitter.Float64() < opt.HoldRate
		if k > 0 && !held {
			index++
		}
		if !held {
			fr.Index = append(fr.Index, index)
			fr.T = append(fr.T, start)
		}
		if err := r.Bin(k, index, start, end, emit); err != nil {
			return fmt.Errorf("synth: publish: %w", err)
		}
		now = end
		// Close every batch that ends by now.
		for c := sc.Start + float64(frameNext)*fb; c <= now; c = sc.Start + float64(frameNext)*fb {
			if err := p.closeFrames(frameSubj, &fr, c); err != nil {
				return err
			}
			frameNext++
		}
		for c := sc.Start + float64(spikeNext)*sb; c <= now; c = sc.Start + float64(spikeNext)*sb {
			if err := p.closeSpikes(spikeSubj, &sp, c); err != nil {
				return err
			}
			spikeNext++
		}
		if err := p.drain(now, true); err != nil {
			stopped = err
			break
		}
	}
	// Whatever is left goes out now: the partial batches, then the end.
	if err := p.closeFrames(frameSubj, &fr, math.Inf(1)); err != nil {
		return err
	}
	if err := p.closeSpikes(spikeSubj, &sp, math.Inf(1)); err != nil {
		return err
	}
	if err := p.drain(math.Inf(1), stopped == nil); err != nil && stopped == nil {
		stopped = err
	}
	endMsg := wire.Block{Kind: wire.KindEnd, Block: opt.Block, T: now}
	if data, err = wire.EncodeBlock(endMsg); err != nil {
		return fmt.Errorf("synth: publish: %w", err)
	}
	if err := nc.Publish(wire.Subject(prefix, wire.SubjectBlock), data); err != nil {
		return fmt.Errorf("synth: publish: %w", err)
	}
	if err := nc.Flush(); err != nil {
		return fmt.Errorf("synth: publish: flush: %w", err)
	}
	return stopped
}

// sendTime is when a batch closed at c leaves: after delay and jitter, not
// before c, and not before the previous batch of its subject.
func (p *publisher) sendTime(c float64, delay time.Duration, last *float64) float64 {
	j := 0.0
	if p.opt.Jitter > 0 {
		j = (2*p.jitter.Float64() - 1) * p.opt.Jitter.Seconds()
	}
	at := math.Max(c, c+delay.Seconds()+j)
	at = math.Max(at, *last)
	*last = at
	return at
}

// closeFrames queues the onsets before c as one batch (none if empty).
func (p *publisher) closeFrames(subject string, fr *wire.Frames, c float64) error {
	n := 0
	for n < len(fr.T) && fr.T[n] < c {
		n++
	}
	if n == 0 {
		return nil
	}
	batch := wire.Frames{Block: fr.Block, Index: fr.Index[:n], T: fr.T[:n]}
	data, err := wire.EncodeFrames(batch)
	if err != nil {
		return fmt.Errorf("synth: publish: %w", err)
	}
	closeAt := c
	if math.IsInf(c, 1) {
		closeAt = fr.T[n-1] // the final, partial batch
	}
	p.frames = append(p.frames, outbound{at: p.sendTime(closeAt, p.opt.FrameDelay, &p.lastFrame), subject: subject, data: data})
	fr.Index = append(fr.Index[:0], fr.Index[n:]...)
	fr.T = append(fr.T[:0], fr.T[n:]...)
	return nil
}

// closeSpikes queues the spikes before c as one batch (split above
// maxBatch). An empty batch is sent too: it tells the receiver that the
// rig is alive and found no spikes.
func (p *publisher) closeSpikes(subject string, sp *wire.Spikes, c float64) error {
	n := 0
	for n < len(sp.T) && sp.T[n] < c {
		n++
	}
	if math.IsInf(c, 1) && n == 0 {
		return nil
	}
	closeAt := c
	if math.IsInf(c, 1) {
		closeAt = sp.T[n-1]
	}
	for i := 0; i < n || i == 0; i += maxBatch {
		j := min(n, i+maxBatch)
		data, err := wire.EncodeSpikes(wire.Spikes{Unit: sp.Unit[i:j], T: sp.T[i:j]})
		if err != nil {
			return fmt.Errorf("synth: publish: %w", err)
		}
		p.spikes = append(p.spikes, outbound{at: p.sendTime(closeAt, p.opt.SpikeDelay, &p.lastSpike), subject: subject, data: data})
	}
	sp.Unit = append(sp.Unit[:0], sp.Unit[n:]...)
	sp.T = append(sp.T[:0], sp.T[n:]...)
	return nil
}

// drain sends, in send-time order, the queued messages due by acquisition
// time until, waiting for each one's time when pace is set.
func (p *publisher) drain(until float64, pace bool) error {
	for {
		var q *[]outbound
		switch {
		case len(p.frames) > 0 && (len(p.spikes) == 0 || p.frames[0].at <= p.spikes[0].at):
			q = &p.frames
		case len(p.spikes) > 0:
			q = &p.spikes
		default:
			return nil
		}
		m := (*q)[0]
		if m.at > until {
			return nil
		}
		if pace {
			if err := p.wait(m.at); err != nil {
				return err
			}
		}
		if err := p.nc.Publish(m.subject, m.data); err != nil {
			return fmt.Errorf("synth: publish: %w", err)
		}
		*q = (*q)[1:]
	}
}

// wait blocks until the wall time of acquisition time at.
func (p *publisher) wait(at float64) error {
	if err := p.ctx.Err(); err != nil {
		return err
	}
	if p.opt.Speed <= 0 {
		return nil
	}
	target := p.wall0.Add(time.Duration((at - p.t0) / p.opt.Speed * float64(time.Second)))
	d := target.Sub(p.opt.Now())
	if d <= 0 {
		return nil
	}
	if p.opt.Sleep != nil {
		p.opt.Sleep(d)
		return p.ctx.Err()
	}
	t := time.NewTimer(d)
	defer t.Stop()
	select {
	case <-p.ctx.Done():
		return p.ctx.Err()
	case <-t.C:
		return nil
	}
}
