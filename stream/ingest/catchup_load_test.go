package ingest

import (
	"encoding/json"
	"fmt"
	"livefield/stream/natstest"
	"os"
	"runtime"
	"strconv"
	"testing"
	"time"

	"livefield/stream/wire"
)

// TestRestartCatchUp measures how long a durable mapper restarted
// LIVEFIELD_CATCHUP seconds into a reference block (16×16 binary noise at
// 60 Hz, 12 lags, 384 units at 10 spikes/s) takes to catch up: the block
// is published into an embedded JetStream server first, then a Rig starts,
// replays the block from its start and folds it in; the clock runs until
// its estimates hold every bin. By hand, not in CI:
// LIVEFIELD_CATCHUP=1200 go test ./stream/ingest -run TestRestartCatchUp -v
func TestRestartCatchUp(t *testing.T) {
	env := os.Getenv("LIVEFIELD_CATCHUP")
	if env == "" {
		t.Skip("set LIVEFIELD_CATCHUP to the seconds of block before the restart, e.g. 1200")
	}
	seconds, err := strconv.ParseFloat(env, 64)
	if err != nil || seconds <= 0 {
		t.Fatalf("LIVEFIELD_CATCHUP=%q: want a number of seconds", env)
	}
	js := natstest.Start(t, natstest.Options{JetStream: true})
	const prefix = "catchup.ref"
	// A first worker creates the stream, then goes away.
	first := startRig(t, js.Connect(t), Options{Prefix: prefix, Durable: true})
	first.Close()
	pub := js.Connect(t)
	start, _ := wire.EncodeBlock(wire.Block{Kind: wire.KindStart, Block: "bench", T: 0, Lags: refLags, FramePeriod: refPeriod,
		Stimulus: json.RawMessage(fmt.Sprintf(`{"type":"binary","width":%d,"height":%d,"seed":3}`, refSide, refSide))})
	msgs, spikes := session(t, seconds)
	if err := pub.Publish(prefix+".block", start); err != nil {
		t.Fatal(err)
	}
	for i, m := range msgs {
		if err := pub.Publish(prefix+"."+subjectNames[m.subj], m.data); err != nil {
			t.Fatal(err)
		}
		if i%1000 == 0 {
			if err := pub.Flush(); err != nil {
				t.Fatal(err)
			}
		}
	}
	if err := pub.Flush(); err != nil {
		t.Fatal(err)
	}
	total := uint64(len(msgs) + 1)
	time.Sleep(time.Second) // let the stream store the last messages
	t0 := time.Now()
	r := startRig(t, js.Connect(t), Options{Prefix: prefix, Durable: true})
	h := pollHealthFor(t, r, 30*time.Minute, func(h Health) bool { return h.Processed >= total })
	read := time.Since(t0)
	snap := r.Sync()
	took := time.Since(t0)
	h = r.Health()
	var ms runtime.MemStats
	runtime.GC()
	runtime.ReadMemStats(&ms)
	t.Logf("restart %.0f s into the block: %d messages read in %.1f s, estimates complete after %.1f s (%.0f× real time); %d of %d spikes; last route %q; %d bins; live heap %d MB, %d MB from the system",
		seconds, h.Processed, read.Seconds(), took.Seconds(), seconds/took.Seconds(), h.SpikesTotal, spikes, h.Route, snap.Bins, ms.HeapAlloc>>20, ms.Sys>>20)
	if h.SpikesTotal != uint64(spikes) || h.BinsWaiting != 0 || len(h.Rejected) != 0 || snap.Bins < int64(seconds*59) {
		t.Fatalf("%d of %d spikes, %d bins waiting, rejected %v, %d bins", h.SpikesTotal, spikes, h.BinsWaiting, h.Rejected, snap.Bins)
	}
}

// pollHealthFor is pollHealth with a deadline of its own.
func pollHealthFor(t *testing.T, r *Rig, d time.Duration, cond func(Health) bool) Health {
	t.Helper()
	deadline := time.Now().Add(d)
	for {
		h := r.Health()
		if cond(h) {
			return h
		}
		if time.Now().After(deadline) {
			t.Fatalf("not done after %v: %+v", d, h)
		}
		time.Sleep(20 * time.Millisecond)
	}
}
