package ingest

import (
	"encoding/json"
	"fmt"
	"math/rand/v2"
	"os"
	"runtime"
	"slices"
	"strconv"
	"sync"
	"testing"
	"time"

	"livefield/stream/natstest"
	"livefield/stream/wire"
)

// TestLoad sustains the reference workload (16×16 binary noise at 60 Hz,
// 12 lags, 384 units at 10 spikes/s) through an embedded JetStream server
// and a durable ingest, for LIVEFIELD_LOAD seconds of stream time (600 when
// set to 1) at LIVEFIELD_LOAD_SPEED times real time (10). It samples the
// heap (runtime.MemStats.HeapInuse), the ingest queue, the JetStream
// backlog and how far the estimates trail the publisher once per wall
// second, and compares the first and the last minute of stream time. Not
// run by CI: go test ./stream/ingest -run TestLoad -v with LIVEFIELD_LOAD=1.
func TestLoad(t *testing.T) {
	env := os.Getenv("LIVEFIELD_LOAD")
	if env == "" {
		t.Skip("set LIVEFIELD_LOAD=1 (600 s of stream time) or a number of seconds")
	}
	seconds, err := strconv.ParseFloat(env, 64)
	if err != nil || seconds <= 0 {
		t.Fatalf("LIVEFIELD_LOAD=%q: want 1 or a number of seconds", env)
	}
	if seconds == 1 {
		seconds = 600
	}
	speed := 10.0
	if s := os.Getenv("LIVEFIELD_LOAD_SPEED"); s != "" {
		if speed, err = strconv.ParseFloat(s, 64); err != nil || speed <= 0 {
			t.Fatalf("LIVEFIELD_LOAD_SPEED=%q", s)
		}
	}
	js := natstest.Start(t, natstest.Options{JetStream: true})
	const prefix = "load.ref"
	r := startRig(t, js.Connect(t), Options{Prefix: prefix, Durable: true})
	pub := js.Connect(t)

	start, _ := wire.EncodeBlock(wire.Block{Kind: wire.KindStart, Block: "load", T: 0, Lags: refLags, FramePeriod: refPeriod,
		Stimulus: json.RawMessage(fmt.Sprintf(`{"type":"binary","width":%d,"height":%d,"seed":3}`, refSide, refSide))})
	if err := pub.Publish(prefix+".block", start); err != nil {
		t.Fatal(err)
	}

	type sample struct {
		wall, pubT, binT float64
		heap             uint64
		queue            int
		backlog          uint64
		update           float64
	}
	var mu sync.Mutex
	var samples []sample
	var pubT float64 // stream time published so far
	stop := make(chan struct{})
	// The live heap (after a collection) after the first minute and at the
	// end tells growth apart from garbage awaiting collection.
	var liveEarly, liveLate uint64
	var wg sync.WaitGroup
	t0w := time.Now()
	wg.Add(1)
	go func() {
		defer wg.Done()
		tick := time.NewTicker(time.Second)
		defer tick.Stop()
		var ms runtime.MemStats
		for {
			select {
			case <-stop:
				return
			case <-tick.C:
			}
			mu.Lock()
			now := pubT
			mu.Unlock()
			if liveEarly == 0 && now >= 60 {
				liveEarly = liveHeap() // after one minute of stream
			}
			if liveLate == 0 && now >= seconds-30 {
				liveLate = liveHeap() // in the last minute, the block still running
			}
			runtime.ReadMemStats(&ms)
			h := r.Health()
			mu.Lock()
			samples = append(samples, sample{wall: time.Since(t0w).Seconds(), pubT: pubT, binT: float64(h.BinTime), heap: ms.HeapInuse,
				queue: h.Queue, backlog: h.Backlog, update: h.UpdateSeconds})
			mu.Unlock()
		}
	}()

	rng := rand.New(rand.NewPCG(2, 2))
	ids := refIDs()
	var frame int64
	var bytes, msgs int
	nextFrames, lastSpikes := 0.05, 0.0
	for now := 0.0; now < seconds; {
		now = min(time.Since(t0w).Seconds()*speed, seconds)
		for nextFrames <= now {
			data, _ := wire.EncodeFrames(framesBefore("load", &frame, refPeriod, nextFrames))
			if err := pub.Publish(prefix+".frames", data); err != nil {
				t.Fatal(err)
			}
			bytes, msgs = bytes+len(data), msgs+1
			nextFrames += 0.05
		}
		for lastSpikes+0.02 <= now {
			s := refSpikes(rng, ids, lastSpikes, lastSpikes+0.02)
			data, _ := wire.EncodeSpikes(s)
			if err := pub.Publish(prefix+".spikes", data); err != nil {
				t.Fatal(err)
			}
			bytes, msgs = bytes+len(data), msgs+1
			lastSpikes += 0.02
		}
		mu.Lock()
		pubT = now
		mu.Unlock()
		time.Sleep(5 * time.Millisecond)
	}
	pubWall := time.Since(t0w).Seconds()
	end, _ := wire.EncodeBlock(wire.Block{Kind: wire.KindEnd, Block: "load", T: seconds})
	if err := pub.Publish(prefix+".block", end); err != nil {
		t.Fatal(err)
	}
	if err := pub.Flush(); err != nil {
		t.Fatal(err)
	}
	deadline := time.Now().Add(time.Duration(seconds/speed*float64(time.Second)) + time.Minute)
	for h := r.Health(); h.BlockState != "ended"; h = r.Health() {
		if time.Now().After(deadline) {
			t.Fatalf("block not ended a minute after the publisher finished: %+v", h)
		}
		time.Sleep(10 * time.Millisecond)
	}
	doneWall := time.Since(t0w).Seconds()
	close(stop)
	wg.Wait()
	h := r.Health()

	minute := func(from, to float64) (heapMed uint64, queueMax int, backlogMax uint64, trailMax, updMax float64) {
		var heaps []uint64
		for _, s := range samples {
			if s.pubT < from || s.pubT >= to {
				continue
			}
			heaps = append(heaps, s.heap)
			queueMax, backlogMax = max(queueMax, s.queue), max(backlogMax, s.backlog)
			if s.binT == s.binT { // not NaN
				trailMax = max(trailMax, s.pubT-s.binT)
			}
			updMax = max(updMax, s.update)
		}
		slices.Sort(heaps)
		if len(heaps) > 0 {
			heapMed = heaps[len(heaps)/2]
		}
		return
	}
	h1, q1, b1, tr1, u1 := minute(0, 60)
	h2, q2, b2, tr2, u2 := minute(seconds-60, seconds)
	t.Logf("%.0f s of stream in %.1f s wall (publisher %.1f s): %.1f× real time; %d messages, %.0f kB/s of stream; %d bins, %d spikes, %d updates",
		seconds, doneWall, pubWall, seconds/doneWall, msgs, float64(bytes)/seconds/1e3, h.Bins, h.SpikesTotal, h.Updates)
	t.Logf("first minute: heap in use %.1f MB (median), queue ≤ %d, JetStream backlog ≤ %d, estimates trail the publisher ≤ %.1f s of stream, update ≤ %.0f ms", float64(h1)/1e6, q1, b1, tr1, u1*1e3)
	t.Logf("live heap after a collection: %.1f MB after the first minute, %.1f MB in the last", float64(liveEarly)/1e6, float64(liveLate)/1e6)
	t.Logf("last minute:  heap in use %.1f MB (median), queue ≤ %d, JetStream backlog ≤ %d, estimates trail the publisher ≤ %.1f s of stream, update ≤ %.0f ms", float64(h2)/1e6, q2, b2, tr2, u2*1e3)
	if len(h.Rejected) != 0 || h.Duplicates != 0 {
		t.Errorf("rejected %v, duplicates %d", h.Rejected, h.Duplicates)
	}
	if rt := seconds / doneWall; rt < speed*0.95 {
		t.Errorf("%.1f× real time, want %.0f×", rt, speed)
	}
	if float64(h2) > 1.5*float64(h1)+50e6 {
		t.Errorf("heap grew from %.1f MB to %.1f MB", float64(h1)/1e6, float64(h2)/1e6)
	}
}

// liveHeap is the heap in use right after a collection.
func liveHeap() uint64 {
	runtime.GC()
	var ms runtime.MemStats
	runtime.ReadMemStats(&ms)
	return ms.HeapAlloc
}
