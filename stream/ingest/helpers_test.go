package ingest

import (
	"context"
	"encoding/json"
	"io"
	"log/slog"
	"testing"
	"time"

	"github.com/nats-io/nats.go"

	"livefield/stream/wire"
)

func quiet() *slog.Logger { return slog.New(slog.NewTextHandler(io.Discard, nil)) }

func startRig(t testing.TB, nc *nats.Conn, opt Options) *Rig {
	t.Helper()
	if opt.Logger == nil {
		opt.Logger = quiet()
	}
	r, err := Start(context.Background(), nc, opt)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { r.Close() })
	return r
}

// publisher publishes on one prefix and counts what it sent, so a test can
// wait until the rig has handled all of it. With loop set it feeds the
// loop directly, at the loop's clock, instead of publishing.
type publisher struct {
	t      testing.TB
	nc     *nats.Conn
	loop   *Loop
	prefix string
	sent   uint64
}

// asyncLoop returns a Loop whose estimator runs on a goroutine of its own,
// as a Rig's, fed by the test goroutine instead of NATS (so that it can
// run in a synctest bubble). The caller closes it.
func asyncLoop(t testing.TB, opt Options) *Loop {
	t.Helper()
	if opt.Logger == nil {
		opt.Logger = quiet()
	}
	if err := opt.fill(); err != nil {
		t.Fatal(err)
	}
	return newLoop(opt, true)
}

func (p *publisher) raw(subject string, data []byte) {
	p.t.Helper()
	if p.loop != nil {
		_ = p.loop.Feed(subject, data, p.loop.opt.Now()) // refusals are counted
	} else if err := p.nc.Publish(wire.Subject(p.prefix, subject), data); err != nil {
		p.t.Fatal(err)
	}
	p.sent++
}

func (p *publisher) msg(subject string, b []byte, err error) {
	p.t.Helper()
	if err != nil {
		p.t.Fatal(err)
	}
	p.raw(subject, b)
}

func (p *publisher) start(block string, stim any, t float64) {
	p.t.Helper()
	b, err := encodeStart(block, stim, t)
	p.msg(wire.SubjectBlock, b, err)
}

func (p *publisher) end(block string, t float64) {
	p.t.Helper()
	b, err := encodeEnd(block, t)
	p.msg(wire.SubjectBlock, b, err)
}

// encodeStart is the start of a block of stimulus stim (a spec) at t, with
// 4 lags of 1/60 s.
func encodeStart(block string, stim any, t float64) ([]byte, error) {
	spec, err := json.Marshal(stim)
	if err != nil {
		return nil, err
	}
	return wire.EncodeBlock(wire.Block{Kind: wire.KindStart, Block: block, T: t, Stimulus: spec, Lags: 4, FramePeriod: 1.0 / 60})
}

func encodeEnd(block string, t float64) ([]byte, error) {
	return wire.EncodeBlock(wire.Block{Kind: wire.KindEnd, Block: block, T: t})
}

// frames publishes frames from…to−1, frame i at t0 + i/60, in batches of 10.
func (p *publisher) frames(block string, from, to int64, t0 float64) {
	p.t.Helper()
	for lo := from; lo < to; lo += 10 {
		b, err := wire.EncodeFrames(frameRun(block, lo, min(lo+10, to), t0))
		p.msg(wire.SubjectFrames, b, err)
	}
}

func frameTime(t0 float64, i int64) float64 { return t0 + float64(i)/60 }

// frameRun is block's frames from…to−1, frame i at frameTime(t0, i).
func frameRun(block string, from, to int64, t0 float64) wire.Frames {
	f := wire.Frames{Block: block}
	for i := from; i < to; i++ {
		f.Index = append(f.Index, i)
		f.T = append(f.T, frameTime(t0, i))
	}
	return f
}

// framesBefore is block's frames from *next on whose onset, i·period,
// comes before t; it moves *next past them (the reference workload's
// batches).
func framesBefore(block string, next *int64, period, t float64) wire.Frames {
	f := wire.Frames{Block: block}
	for ; float64(*next)*period < t; *next++ {
		f.Index = append(f.Index, *next)
		f.T = append(f.T, float64(*next)*period)
	}
	return f
}

func (p *publisher) spikes(units []string, t []float64) {
	p.t.Helper()
	b, err := wire.EncodeSpikes(wire.Spikes{Unit: units, T: t})
	p.msg(wire.SubjectSpikes, b, err)
}

func (p *publisher) control(c wire.Control) {
	p.t.Helper()
	b, err := wire.EncodeControl(c)
	p.msg(wire.SubjectControl, b, err)
}

// settle flushes the connection, waits (polling, 20 s deadline) until the
// rig has handled every message p sent, and runs an update.
func (p *publisher) settle(r *Rig) Health {
	p.t.Helper()
	if err := p.nc.Flush(); err != nil {
		p.t.Fatal(err)
	}
	deadline := time.Now().Add(20 * time.Second)
	for r.core.n.processed.Load() < p.sent {
		if time.Now().After(deadline) {
			p.t.Fatalf("rig %s handled %d of %d messages", r.Prefix(), r.core.n.processed.Load(), p.sent)
		}
		time.Sleep(2 * time.Millisecond)
	}
	r.Sync()
	return r.Health()
}

func binary(w, h int, seed uint64) map[string]any {
	return map[string]any{"type": "binary", "width": w, "height": h, "seed": seed}
}

// pollHealth polls r's counters until cond holds (20 s deadline).
func pollHealth(t testing.TB, r *Rig, what string, cond func(Health) bool) Health {
	t.Helper()
	deadline := time.Now().Add(20 * time.Second)
	for {
		h := r.Health()
		if cond(h) {
			return h
		}
		if time.Now().After(deadline) {
			t.Fatalf("timed out waiting for %s: %+v", what, h)
		}
		time.Sleep(2 * time.Millisecond)
	}
}
