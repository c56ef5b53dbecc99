package synth

import (
	"context"
	"errors"
	"math"
	"reflect"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats.go"

	"livefield/stream/natstest"
	"livefield/stream/stimulus"
	"livefield/stream/wire"
)

// fakeClock advances only when slept on, so paced publishing runs at once.
type fakeClock struct {
	now    time.Time
	sleeps int
}

func (c *fakeClock) Now() time.Time            { return c.now }
func (c *fakeClock) Sleep(d time.Duration)     { c.now = c.now.Add(d); c.sleeps++ }
func newFakeClock() *fakeClock                 { return &fakeClock{now: time.Unix(1e9, 0)} }
func (c *fakeClock) since(t time.Time) float64 { return c.now.Sub(t).Seconds() }

// recorder keeps every message of a prefix in arrival order.
type recorder struct {
	mu   sync.Mutex
	msgs []*nats.Msg
	end  chan struct{}
}

func record(t *testing.T, nc *nats.Conn, prefix string) *recorder {
	t.Helper()
	r := &recorder{end: make(chan struct{})}
	sub, err := nc.Subscribe(prefix+".>", func(m *nats.Msg) {
		r.mu.Lock()
		r.msgs = append(r.msgs, m)
		r.mu.Unlock()
		if strings.HasSuffix(m.Subject, ".block") && strings.Contains(string(m.Data), `"kind":"end"`) {
			close(r.end)
		}
	})
	if err != nil {
		t.Fatal(err)
	}
	if err := sub.SetPendingLimits(-1, -1); err != nil {
		t.Fatal(err)
	}
	if err := nc.Flush(); err != nil {
		t.Fatal(err)
	}
	return r
}

func (r *recorder) wait(t *testing.T) []*nats.Msg {
	t.Helper()
	select {
	case <-r.end:
	case <-time.After(20 * time.Second):
		t.Fatal("no block end received")
	}
	r.mu.Lock()
	defer r.mu.Unlock()
	return r.msgs
}

var testSpec = stimulus.Spec{Type: "binary", Width: 8, Height: 8, Seed: 4}

func testRig(t *testing.T) *Cortex {
	t.Helper()
	src, err := stimulus.Open(testSpec, "")
	if err != nil {
		t.Fatal(err)
	}
	r, err := New(Scenario{Seed: 3, Start: 100}, src)
	if err != nil {
		t.Fatal(err)
	}
	return r
}

func TestPublish(t *testing.T) {
	s := natstest.Start(t, natstest.Options{})
	rec := record(t, s.Connect(t), "livefield.test")
	clock := newFakeClock()
	wall0 := clock.now
	opt := PublishOptions{
		Stimulus: testSpec, Duration: 20, HoldRate: 0.01, Speed: 10,
		FrameDelay: 5 * time.Millisecond, SpikeDelay: 80 * time.Millisecond, Jitter: 5 * time.Millisecond,
		Geometry: &wire.Geometry{DistanceCM: 57, PixelSizeCM: 1},
		Now:      clock.Now, Sleep: clock.Sleep,
	}
	rig := testRig(t)
	if err := Publish(context.Background(), s.Connect(t), "livefield.test", rig, opt); err != nil {
		t.Fatal(err)
	}
	msgs := rec.wait(t)

	// Block start first, block end last.
	start, err := wire.DecodeBlock(msgs[0].Data)
	if err != nil || start.Kind != wire.KindStart || start.T != 100 || start.Lags != DefaultLags ||
		start.FramePeriod != DefaultPeriod || start.Block != DefaultBlock || *start.Geometry != *opt.Geometry {
		t.Fatalf("first message %s (%v)", msgs[0].Data, err)
	}
	if spec, err := stimulus.ParseSpec(start.Stimulus); err != nil || spec != testSpec {
		t.Fatalf("stimulus %s (%v)", start.Stimulus, err)
	}
	end, err := wire.DecodeBlock(msgs[len(msgs)-1].Data)
	if err != nil || end.Kind != wire.KindEnd || math.Abs(end.T-120) > 1e-9 {
		t.Fatalf("last message %s (%v)", msgs[len(msgs)-1].Data, err)
	}

	var onsets []float64
	var index []int64
	type sp struct {
		id string
		t  float64
	}
	var spikes []sp
	lastFrame, lastSpike := -1.0, -1.0
	for _, m := range msgs[1 : len(msgs)-1] {
		switch m.Subject {
		case "livefield.test.frames":
			f, err := wire.DecodeFrames(m.Data)
			if err != nil {
				t.Fatal(err)
			}
			onsets = append(onsets, f.T...)
			index = append(index, f.Index...)
			lastFrame = f.T[len(f.T)-1]
			// Spikes travel later than frames: none received yet is as
			// recent as the newest onset.
			if lastSpike >= lastFrame {
				t.Errorf("frames up to %.4f arrived after spikes up to %.4f", lastFrame, lastSpike)
			}
		case "livefield.test.spikes":
			b, err := wire.DecodeSpikes(m.Data)
			if err != nil {
				t.Fatal(err)
			}
			for i := range b.Unit {
				spikes = append(spikes, sp{b.Unit[i], b.T[i]})
			}
			if len(b.T) > 0 {
				lastSpike = b.T[len(b.T)-1]
				// (An onset lags its batch's close by up to two frame
				// periods after a held frame.)
				if lastFrame < lastSpike-2*DefaultPeriod {
					t.Errorf("spikes up to %.4f arrived before frames reached them (%.4f)", lastSpike, lastFrame)
				}
			}
		default:
			t.Fatalf("unexpected subject %s", m.Subject)
		}
	}

	// Frames: the index always advances by one; an onset gap is one frame
	// period, or two after a held frame.
	dt := DefaultPeriod
	held := 0
	for i := 1; i < len(onsets); i++ {
		if index[i] != index[i-1]+1 {
			t.Fatalf("index %d follows %d", index[i], index[i-1])
		}
		switch gap := onsets[i] - onsets[i-1]; {
		case math.Abs(gap-dt) < 1e-9:
		case math.Abs(gap-2*dt) < 1e-9:
			held++
		default:
			t.Fatalf("onset gap %g s", gap)
		}
	}
	bins := 20 * 60
	// Held frames are binomial(1199, 0.01): mean 12, sd 3.4.
	if held < 2 || held > 30 || len(onsets)+held != bins {
		t.Fatalf("%d onsets with %d held frames for %d bins", len(onsets), held, bins)
	}

	// The spikes are those of the same scenario shown the same frames,
	// held frames included, none lost or added.
	twin := testRig(t)
	var want []sp
	j := 0
	for k := range int64(bins) {
		bs := 100 + float64(k)*dt
		for j+1 < len(onsets) && onsets[j+1] <= bs+1e-9 {
			j++
		}
		if err := twin.Bin(k, index[j], bs, 100+float64(k+1)*dt, func(id string, tt float64) { want = append(want, sp{id, tt}) }); err != nil {
			t.Fatal(err)
		}
	}
	if len(want) == 0 || !reflect.DeepEqual(spikes, want) {
		for i := range min(len(spikes), len(want)) {
			if spikes[i] != want[i] {
				t.Errorf("spike %d: received %v, the rig makes %v", i, spikes[i], want[i])
				break
			}
		}
		t.Fatalf("received %d spikes, the rig makes %d", len(spikes), len(want))
	}

	// Paced at ten times real time: 20 s of data (plus the last spike
	// delay) in about 2 s of the injected clock.
	if got := clock.since(wall0); got < 2 || got > 2.02 {
		t.Fatalf("publishing took %g s of clock, want 2", got)
	}
}

func TestPublishCancel(t *testing.T) {
	s := natstest.Start(t, natstest.Options{})
	rec := record(t, s.Connect(t), "livefield.c")
	clock := newFakeClock()
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	sleep := func(d time.Duration) {
		clock.Sleep(d)
		if clock.sleeps == 100 {
			cancel()
		}
	}
	err := Publish(ctx, s.Connect(t), "livefield.c", testRig(t), PublishOptions{
		Stimulus: testSpec, Duration: 60, Speed: 1, Now: clock.Now, Sleep: sleep,
	})
	if !errors.Is(err, context.Canceled) {
		t.Fatalf("Publish returned %v, want context.Canceled", err)
	}
	msgs := rec.wait(t)
	end, err := wire.DecodeBlock(msgs[len(msgs)-1].Data)
	if err != nil || end.T <= 100 || end.T >= 110 {
		t.Fatalf("block end %s (%v), want one a few seconds in", msgs[len(msgs)-1].Data, err)
	}
}

func TestPublishUnpaced(t *testing.T) {
	s := natstest.Start(t, natstest.Options{})
	rec := record(t, s.Connect(t), "livefield.u")
	clock := newFakeClock()
	err := Publish(context.Background(), s.Connect(t), "livefield.u", testRig(t), PublishOptions{
		Stimulus: testSpec, Duration: 5, HoldRate: -1, Now: clock.Now, Sleep: clock.Sleep,
	})
	if err != nil {
		t.Fatal(err)
	}
	msgs := rec.wait(t)
	if clock.sleeps != 0 {
		t.Fatalf("Speed 0 slept %d times", clock.sleeps)
	}
	frames := 0
	for _, m := range msgs {
		if strings.HasSuffix(m.Subject, ".frames") {
			f, err := wire.DecodeFrames(m.Data)
			if err != nil {
				t.Fatal(err)
			}
			frames += len(f.T)
		}
	}
	if frames != 300 {
		t.Fatalf("%d frame onsets for 5 s at 60 Hz without holds, want 300", frames)
	}
}

func TestPublishRejects(t *testing.T) {
	s := natstest.Start(t, natstest.Options{})
	nc := s.Connect(t)
	rig := testRig(t)
	for _, tc := range []struct {
		name string
		opt  PublishOptions
	}{
		{"no stimulus", PublishOptions{}},
		{"negative duration", PublishOptions{Stimulus: testSpec, Duration: -1}},
		{"hold rate one", PublishOptions{Stimulus: testSpec, HoldRate: 1}},
		{"negative delay", PublishOptions{Stimulus: testSpec, SpikeDelay: -time.Second}},
	} {
		if err := Publish(context.Background(), nc, "livefield.r", rig, tc.opt); err == nil || !strings.HasPrefix(err.Error(), "synth: publish: ") {
			t.Errorf("%s: error %v", tc.name, err)
		}
	}
}

// A batch leaves within ±jitter of its delay, never before it closes and
// never ahead of the previous batch on its subject.
func TestSendTime(t *testing.T) {
	opt := PublishOptions{Stimulus: testSpec, Jitter: 10 * time.Millisecond}
	if err := opt.fill(); err != nil {
		t.Fatal(err)
	}
	p := &publisher{opt: opt, jitter: testRig(t).rng}
	last := 0.0
	prev := 0.0
	for i := range 1000 {
		c := 1 + float64(i)*0.02
		at := p.sendTime(c, 40*time.Millisecond, &last)
		if at < c+0.030-1e-12 || (at > c+0.050+1e-12 && at != prev) {
			t.Fatalf("batch closed at %g leaves at %g", c, at)
		}
		if at < prev {
			t.Fatalf("send times run backwards: %g after %g", at, prev)
		}
		prev = at
	}
	last = 0
	if at := p.sendTime(1, 0, &last); at < 1 {
		t.Fatalf("zero delay sends at %g, before the close at 1", at)
	}
}
