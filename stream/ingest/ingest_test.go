package ingest

import (
	"fmt"
	"maps"
	"path/filepath"
	"strings"
	"sync/atomic"
	"testing"
	"testing/synctest"
	"time"

	"livefield/online"
	"livefield/stream/natstest"
	"livefield/stream/stimulus"
	"livefield/stream/wire"
)

const t0 = 1.0 // acquisition time of frame 0 in these tests

// feed publishes block b1 (binary 8×8 noise, seed 7) with frames 0…n−1 and
// two units: "on" fires once in every bin whose frame has pixel (2, 3)
// bright, "odd" in every third bin; no unit fires in the first 10 bins. It
// returns the spikes sent per unit.
func feed(t *testing.T, p *publisher, block string, n int64, ids [2]string) map[string]int64 {
	t.Helper()
	src, err := stimulus.Open(stimulus.Spec{Type: "binary", Width: 8, Height: 8, Seed: 7}, "")
	if err != nil {
		t.Fatal(err)
	}
	p.start(block, binary(8, 8, 7), t0)
	frame := make([]float64, 64)
	sent := map[string]int64{}
	for lo := int64(0); lo < n; lo += 60 {
		hi := min(lo+60, n)
		p.frames(block, lo, hi, t0)
		var units []string
		var ts []float64
		for i := max(lo, 10); i < hi; i++ {
			if err := src.FrameTo(frame, i); err != nil {
				t.Fatal(err)
			}
			mid := frameTime(t0, i) + 0.5/60
			if frame[2*8+3] > 0 {
				units, ts = append(units, ids[0]), append(ts, mid)
				sent[ids[0]]++
			}
			if i%3 == 0 {
				units, ts = append(units, ids[1]), append(ts, mid+0.1/60)
				sent[ids[1]]++
			}
		}
		p.spikes(units, ts)
	}
	return sent
}

func spikesOf(s *online.Snapshot) map[string]int64 {
	out := map[string]int64{}
	if s == nil {
		return out
	}
	for _, u := range s.Units {
		out[u.ID] = u.Spikes
	}
	return out
}

func TestBlockToBins(t *testing.T) {
	srv := natstest.Start(t, natstest.Options{})
	nc := srv.Connect(t)
	r := startRig(t, nc, Options{Prefix: "test.bins"})
	p := &publisher{t: t, nc: nc, prefix: "test.bins"}
	sent := feed(t, p, "b1", 600, [2]string{"on", "odd"})
	p.end("b1", frameTime(t0, 600))
	h := p.settle(r)

	// 600 frame onsets and a block end give 600 bins, one per frame
	// period (a bin is [onset, next onset), see stream/binning).
	if h.Bins != 600 || h.BlockState != "ended" || h.Block != "b1" || h.Blocks != 1 {
		t.Fatalf("bins %d, block %q %s (%d blocks); want 600 bins of ended block b1", h.Bins, h.Block, h.BlockState, h.Blocks)
	}
	if want := uint64(sent["on"] + sent["odd"]); h.SpikesTotal != want || h.LateSpikes != 0 {
		t.Fatalf("spikes %d (late %d), want %d (0)", h.SpikesTotal, h.LateSpikes, want)
	}
	if len(h.Rejected) != 0 {
		t.Fatalf("rejected %v, want none", h.Rejected)
	}
	if h.Messages["frames"] != 60 || h.Messages["spikes"] != 10 || h.Messages["block"] != 2 {
		t.Fatalf("messages %v, want 2 block, 60 frames, 10 spikes", h.Messages)
	}
	if h.Connection != "CONNECTED" {
		t.Errorf("connection %q, want CONNECTED", h.Connection)
	}
	snap := r.Snapshot()
	if snap.Block != "b1" {
		t.Errorf("snapshot block %q, want b1", snap.Block)
	}
	if got := spikesOf(snap); got["on"] != sent["on"] || got["odd"] != sent["odd"] {
		t.Errorf("snapshot spikes %v, want %v", got, sent)
	}
	// "on" fires exactly when pixel (row 2, column 3) is bright at lag 0:
	// its STA there is the largest of all pixels and lags.
	d, ok := snap.Detail("on")
	if !ok {
		t.Fatal("no detail for unit on")
	}
	best := 0
	for i, v := range d.STA {
		if v > d.STA[best] {
			best = i
		}
	}
	if best != 2*8+3 {
		t.Errorf("STA peak at flat index %d, want %d (lag 0, row 2, column 3)", best, 2*8+3)
	}
}

func TestLateSpikes(t *testing.T) {
	srv := natstest.Start(t, natstest.Options{})
	nc := srv.Connect(t)
	r := startRig(t, nc, Options{Prefix: "test.late", Grace: 0.25})
	p := &publisher{t: t, nc: nc, prefix: "test.late"}
	feed(t, p, "b1", 600, [2]string{"on", "odd"})
	before := p.settle(r)
	// The watermark is near t0 + 10 s: bins of the first seconds closed
	// long ago. Seven spikes at t = 2 s are late, and counted as such.
	p.spikes([]string{"on", "on", "odd", "odd", "odd", "x", "x"}, []float64{2, 2, 2, 2, 2, 2, 2})
	h := p.settle(r)
	if got := h.LateSpikes - before.LateSpikes; got != 7 {
		t.Fatalf("late spikes +%d, want +7", got)
	}
	if h.Bins != before.Bins {
		t.Errorf("late spikes changed the bins: %d → %d", before.Bins, h.Bins)
	}
	if !(h.StreamLag >= 0.25) {
		t.Errorf("stream lag %v s, want at least the 0.25 s grace", h.StreamLag)
	}
}

func TestReset(t *testing.T) {
	srv := natstest.Start(t, natstest.Options{})
	nc := srv.Connect(t)
	r := startRig(t, nc, Options{Prefix: "test.reset"})
	p := &publisher{t: t, nc: nc, prefix: "test.reset"}
	feed(t, p, "b1", 300, [2]string{"on", "odd"})
	p.settle(r)
	if got := spikesOf(r.Snapshot()); got["on"] == 0 {
		t.Fatalf("no spikes before the reset: %v", got)
	}
	for _, how := range []string{"control", "api"} {
		if how == "control" {
			p.control(wire.Control{Command: wire.CommandReset})
		} else {
			r.Reset()
		}
		h := p.settle(r)
		for id, n := range spikesOf(r.Snapshot()) {
			if n != 0 {
				t.Errorf("%s reset: unit %s keeps %d spikes", how, id, n)
			}
		}
		if h.BlockState != "running" || len(h.Rejected) != 0 {
			t.Errorf("%s reset: block %s, rejected %v; want running, none", how, h.BlockState, h.Rejected)
		}
	}
	if h := r.Health(); h.Resets != 2 {
		t.Errorf("resets %d, want 2", h.Resets)
	}
	// The stream goes on after a reset.
	p.frames("b1", 300, 360, t0)
	p.spikes([]string{"on"}, []float64{frameTime(t0, 330)})
	p.spikes([]string{"odd"}, []float64{frameTime(t0, 400)})
	p.settle(r)
	if got := spikesOf(r.Snapshot()); got["on"] != 1 {
		t.Errorf("after reset and one more spike: %v, want on = 1", got)
	}
}

func TestTwoRigs(t *testing.T) {
	srv := natstest.Start(t, natstest.Options{})
	nc := srv.Connect(t)
	r1 := startRig(t, nc, Options{Prefix: "test.rig1"})
	r2 := startRig(t, nc, Options{Prefix: "test.rig2"})
	p1 := &publisher{t: t, nc: nc, prefix: "test.rig1"}
	p2 := &publisher{t: t, nc: nc, prefix: "test.rig2"}
	s1 := feed(t, p1, "one", 600, [2]string{"a1", "a2"})
	s2 := feed(t, p2, "two", 300, [2]string{"b1", "b2"})
	p1.end("one", frameTime(t0, 600))
	p2.end("two", frameTime(t0, 300))
	h1, h2 := p1.settle(r1), p2.settle(r2)
	if h1.Block != "one" || h2.Block != "two" {
		t.Fatalf("blocks %q and %q, want one and two", h1.Block, h2.Block)
	}
	if h1.SpikesTotal != uint64(s1["a1"]+s1["a2"]) || h2.SpikesTotal != uint64(s2["b1"]+s2["b2"]) {
		t.Fatalf("spikes %d and %d, want %v and %v", h1.SpikesTotal, h2.SpikesTotal, s1, s2)
	}
	g1, g2 := spikesOf(r1.Snapshot()), spikesOf(r2.Snapshot())
	if !maps.Equal(g1, s1) || !maps.Equal(g2, s2) {
		t.Fatalf("rig1 units %v (want %v), rig2 units %v (want %v)", g1, s1, g2, s2)
	}
}

// TestRejections sends one bad message at a time to a running block: each
// is counted under its reason and leaves bins, spikes and estimates as
// they were.
func TestRejections(t *testing.T) {
	srv := natstest.Start(t, natstest.Options{})
	nc := srv.Connect(t)
	const maxPayload = 64 << 10
	r := startRig(t, nc, Options{Prefix: "test.bad", MaxUnits: 32, MaxPayload: maxPayload, StimuliDir: filepath.Join("..", "..", "testdata", "ingest")})
	p := &publisher{t: t, nc: nc, prefix: "test.bad"}
	feed(t, p, "b1", 600, [2]string{"on", "odd"})
	base := p.settle(r)
	baseUnits := spikesOf(r.Snapshot())

	many := make([]string, 40)
	manyT := make([]float64, 40)
	for i := range many {
		many[i] = fmt.Sprintf("new%d", i)
		manyT[i] = 10.5
	}
	explosion, _ := wire.EncodeSpikes(wire.Spikes{Unit: many, T: manyT})
	huge := `{"unit":["on"],"t":[10.5],"block":"` + strings.Repeat("x", maxPayload) + `"}`

	for _, tc := range []struct {
		name, subject, data, reason string
	}{
		{"malformed JSON", "spikes", `{"unit":["on"],"t":[10.5`, wire.ReasonSyntax},
		{"not an object", "spikes", `[1,2]`, wire.ReasonWrongType},
		{"wrong type", "spikes", `{"unit":[1],"t":[10.5]}`, wire.ReasonWrongType},
		{"non-finite time", "spikes", `{"unit":["on"],"t":[1e999]}`, wire.ReasonNonFinite},
		{"negative time", "spikes", `{"unit":["on"],"t":[-1]}`, wire.ReasonNegativeTime},
		{"time running backwards", "spikes", `{"unit":["on","on"],"t":[10.6,10.5]}`, wire.ReasonTimeOrder},
		{"unequal arrays", "spikes", `{"unit":["on"],"t":[10.5,10.6]}`, wire.ReasonLengthMismatch},
		{"missing field", "spikes", `{"t":[10.5]}`, wire.ReasonMissingField},
		{"frames backwards across messages", "frames", `{"block":"b1","index":[700,701],"t":[5,5.1]}`, ReasonBadFrames},
		{"frames of an unknown block", "frames", `{"block":"nope","index":[600],"t":[11]}`, ReasonUnknownBlock},
		{"spikes of another block", "spikes", `{"block":"nope","unit":["on"],"t":[10.5]}`, ReasonUnknownBlock},
		{"broken stimulus spec", "block", `{"kind":"start","block":"b2","t":20,"stimulus":{"type":"spiral","width":8,"height":8}}`, ReasonBadStimulus},
		{"frames of the rejected block", "frames", `{"block":"b2","index":[0],"t":[20]}`, ReasonBlockRejected},
		{"movie path outside the stimuli dir", "block", `{"kind":"start","block":"b4","t":20,"stimulus":{"type":"movie","file":"../x.npy"}}`, ReasonBadStimulus},
		{"absolute movie path", "block", `{"kind":"start","block":"b5","t":20,"stimulus":{"type":"movie","file":"/etc/passwd"}}`, ReasonBadStimulus},
		{"missing movie file", "block", `{"kind":"start","block":"b3","t":20,"stimulus":{"type":"movie","file":"absent.npy"}}`, ReasonBadStimulus},
		{"end of another block", "block", `{"kind":"end","block":"b9","t":20}`, ReasonUnknownBlock},
		{"oversized message", "spikes", huge, wire.ReasonTooLarge},
		{"unit ids beyond the cap", "spikes", string(explosion), ReasonUnitCap},
		{"unknown command", "control", `{"command":"jump"}`, wire.ReasonUnknownCommand},
	} {
		t.Run(tc.name, func(t *testing.T) {
			before := r.Health().Rejected[tc.reason]
			p.raw(tc.subject, []byte(tc.data))
			h := p.settle(r)
			if got := h.Rejected[tc.reason] - before; got != 1 {
				t.Fatalf("rejected[%q] +%d, want +1 (all: %v)", tc.reason, got, h.Rejected)
			}
			if h.Bins != base.Bins || h.SpikesTotal != base.SpikesTotal || h.Block != "b1" || h.BlockState != "running" {
				t.Fatalf("bins %d spikes %d block %q %s, want %d %d b1 running",
					h.Bins, h.SpikesTotal, h.Block, h.BlockState, base.Bins, base.SpikesTotal)
			}
			if got := spikesOf(r.Snapshot()); !maps.Equal(got, baseUnits) {
				t.Fatalf("estimates changed: %v, want %v", got, baseUnits)
			}
		})
	}
	h := r.Health()
	if h.RejectedBlock != "b3" || !strings.Contains(h.BlockError, "absent.npy") {
		t.Errorf("health names rejected block %q: %q; want b3 and the missing file", h.RejectedBlock, h.BlockError)
	}
}

func TestMovieFrameRange(t *testing.T) {
	srv := natstest.Start(t, natstest.Options{})
	nc := srv.Connect(t)
	r := startRig(t, nc, Options{Prefix: "test.movie", StimuliDir: filepath.Join("..", "..", "testdata", "ingest")})
	p := &publisher{t: t, nc: nc, prefix: "test.movie"}
	// testdata/ingest/movie.npy has 30 frames (see make_movie.py and
	// movie.json, written by numpy).
	p.start("m", map[string]any{"type": "movie", "file": "movie.npy", "sha256": "360a59acbe60fa6da24434a7db68e16012c4c3d43f704690ed8029c348d8a129"}, t0)
	p.frames("m", 0, 30, t0)
	p.spikes([]string{"u"}, []float64{frameTime(t0, 29) + 3})
	h := p.settle(r)
	if h.BlockState != "running" || h.Bins != 29 {
		t.Fatalf("block %s with %d bins (%v), want running with 29 (the 30th waits for its end)", h.BlockState, h.Bins, h.Rejected)
	}
	p.raw("frames", []byte(`{"block":"m","index":[30,31],"t":[1.6,1.7]}`))
	h = p.settle(r)
	if h.Rejected[ReasonFrameRange] != 1 || h.Bins != 29 {
		t.Fatalf("rejected %v, bins %d; want one %s and 29 bins", h.Rejected, h.Bins, ReasonFrameRange)
	}
}

// TestUpdateClock checks that the estimator goroutine updates on the
// injected clock: none until UpdateEvery has passed on it, however many
// ticks go by, then one. It runs in a synctest bubble, so the ticks are
// the fake clock's and synctest.Wait says when the estimator has done
// all it can: no sleeping on the machine's time.
func TestUpdateClock(t *testing.T) {
	// The mapper's worker pool lives as long as the process and starts at
	// its first update: start it outside the bubble, which must end with
	// no goroutine of its own left.
	warm, err := NewLoop(Options{Logger: quiet()})
	if err != nil {
		t.Fatal(err)
	}
	feed(t, &publisher{t: t, loop: warm}, "warm", 120, [2]string{"on", "odd"})
	warm.Finish(time.Now())
	warm.Close()

	synctest.Test(t, func(t *testing.T) {
		var now atomic.Int64 // nanoseconds since an arbitrary epoch
		clock := func() time.Time { return time.Unix(0, now.Load()) }
		l := asyncLoop(t, Options{Prefix: "test.clock", Now: clock})
		defer l.Close()
		p := &publisher{t: t, loop: l}
		feed(t, p, "b1", 120, [2]string{"on", "odd"})
		// The clock has not moved since the block started: the first
		// update (the block start's) is the only one, and it holds no bins.
		time.Sleep(3 * tickEvery)
		synctest.Wait()
		if h := l.Health(); h.Processed != p.sent || h.Updates != 1 || h.Bins != 0 {
			t.Fatalf("before the clock moved: %d of %d messages, %d updates, %d bins; want all, 1 and 0", h.Processed, p.sent, h.Updates, h.Bins)
		}
		now.Add(int64(DefaultUpdateEvery))
		time.Sleep(tickEvery)
		synctest.Wait()
		if h := l.Health(); h.Updates != 2 || h.Bins == 0 || h.LastUpdate != "1970-01-01T00:00:01Z" {
			t.Fatalf("second update: %d updates, %d bins at %q; want 2, bins at 1970-01-01T00:00:01Z", h.Updates, h.Bins, h.LastUpdate)
		}
	})
}
