package ingest

import (
	"context"
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"net/http"
	"net/http/httptest"
	"sync"
	"testing"
	"time"

	"livefield/display"
	"livefield/stream/binning"
	"livefield/stream/natstest"
	"livefield/stream/wire"
)

// The reference workload: 16×16 binary noise at 60 Hz, 12 lags, 384 units
// firing at 10 spikes/s; frames in 50 ms batches, spikes in 20 ms batches.
const (
	refSide   = 16
	refLags   = 12
	refUnits  = 384
	refRate   = 10.0
	refPeriod = 1.0 / 60
)

func refIDs() []string {
	ids := make([]string, refUnits)
	for i := range ids {
		ids[i] = fmt.Sprintf("ch%02d.%d", i%32, i/32)
	}
	return ids
}

// refSpikes returns the spikes of [from, to) for all units, Poisson at
// refRate, in time order.
func refSpikes(rng *rand.Rand, ids []string, from, to float64) wire.Spikes {
	var s wire.Spikes
	type sp struct {
		u string
		t float64
	}
	var all []sp
	for _, id := range ids {
		for t := from + rng.ExpFloat64()/refRate; t < to; t += rng.ExpFloat64() / refRate {
			all = append(all, sp{id, t})
		}
	}
	// insertion by time (batches are short)
	for i := 1; i < len(all); i++ {
		for j := i; j > 0 && all[j].t < all[j-1].t; j-- {
			all[j], all[j-1] = all[j-1], all[j]
		}
	}
	for _, x := range all {
		s.Unit = append(s.Unit, x.u)
		s.T = append(s.T, x.t)
	}
	return s
}

// session encodes seconds of the reference workload, in arrival order.
func session(b testing.TB, seconds float64) (msgs []message, spikes int) {
	rng := rand.New(rand.NewPCG(1, 1))
	ids := refIDs()
	frame := int64(0)
	nextFrames, nextSpikes := 0.05, 0.02
	for now := 0.0; now < seconds; now += 0.01 {
		if now+1e-9 >= nextFrames {
			data, err := wire.EncodeFrames(framesBefore("bench", &frame, refPeriod, nextFrames))
			if err != nil {
				b.Fatal(err)
			}
			msgs = append(msgs, message{subj: subjFrames, data: data})
			nextFrames += 0.05
		}
		if now+1e-9 >= nextSpikes {
			s := refSpikes(rng, ids, nextSpikes-0.02, nextSpikes)
			data, err := wire.EncodeSpikes(s)
			if err != nil {
				b.Fatal(err)
			}
			msgs = append(msgs, message{subj: subjSpikes, data: data})
			spikes += len(s.T)
			nextSpikes += 0.02
		}
	}
	return msgs, spikes
}

// BenchmarkDecodeBin measures the owner goroutine's per-message path
// without the estimator: decoding (wire.Decoder), unit id lookup and
// binning, in spikes per second of one core. Target ≥ 1,000,000 spikes/s.
func BenchmarkDecodeBin(b *testing.B) {
	msgs, spikes := session(b, 10)
	var dec wire.Decoder
	var fr wire.Frames
	var sp wire.Spikes
	var bin binning.Bin
	ids := map[string]int{}
	var units []int
	b.ReportAllocs()
	b.ResetTimer()
	for range b.N {
		bn, err := binning.New(binning.Config{FramePeriod: refPeriod, Grace: binning.DefaultGrace})
		if err != nil {
			b.Fatal(err)
		}
		for _, m := range msgs {
			switch m.subj {
			case subjFrames:
				if err := dec.FramesTo(&fr, m.data); err != nil {
					b.Fatal(err)
				}
				if err := bn.AddFrames(fr.Index, fr.T); err != nil {
					b.Fatal(err)
				}
			case subjSpikes:
				if err := dec.SpikesTo(&sp, m.data); err != nil {
					b.Fatal(err)
				}
				units = units[:0]
				for _, id := range sp.Unit {
					u, ok := ids[id]
					if !ok {
						u = len(ids)
						ids[id] = u
					}
					units = append(units, u)
				}
				bn.AddSpikes(units, sp.T)
			}
			for bn.Next(&bin) {
			}
		}
	}
	b.ReportMetric(float64(spikes)*float64(b.N)/b.Elapsed().Seconds(), "spikes/s")
}

// BenchmarkLoop is the message path at the reference workload: decoding,
// binning and the estimator's sufficient statistics (AddBin, not Update),
// on one goroutine. x-realtime is seconds of stream per second of work;
// the target is ≥ 50 on one core (-cpu 1).
func BenchmarkLoop(b *testing.B) {
	msgs, spikes := session(b, 30)
	var bins uint64
	start, _ := json.Marshal(map[string]any{"kind": "start", "block": "bench", "t": 0, "lags": refLags,
		"stimulus": binary(refSide, refSide, 3)})
	b.ReportAllocs()
	b.ResetTimer()
	for range b.N {
		// The block start (a new mapper and its 75 MB of ridge state) is
		// not the message path: it happens once a block.
		b.StopTimer()
		c, err := NewLoop(Options{Prefix: "bench", Logger: quiet(), UpdateEvery: time.Hour})
		if err != nil {
			b.Fatal(err)
		}
		feedRaw(c, message{subj: subjBlock, data: start})
		b.StartTimer()
		for _, m := range msgs {
			feedRaw(c, m)
		}
		if h := c.Health(); len(h.Rejected) != 0 {
			b.Fatalf("rejected %v", h.Rejected)
		}
		bins = c.n.bins.Load()
		b.StopTimer()
		c.Close()
		b.StartTimer()
	}
	b.ReportMetric(float64(spikes)*float64(b.N)/b.Elapsed().Seconds(), "spikes/s")
	b.ReportMetric(float64(bins)*refPeriod*float64(b.N)/b.Elapsed().Seconds(), "x-realtime")
	b.ReportMetric(float64(bins)*float64(b.N)/b.Elapsed().Seconds(), "bins/s")
}

// BenchmarkLatency runs the reference workload in real time over an
// embedded nats-server and measures, per iteration, the wall time from the
// publication of a probe unit's spike to its presence in the spike counts
// of GET /api/units. Target ≤ 1.5 s.
func BenchmarkLatency(b *testing.B) {
	srv := natstest.Start(b, natstest.Options{})
	sub, pubc := srv.Connect(b), srv.Connect(b)
	r := startRig(b, sub, Options{Prefix: "bench.lat"})
	web := httptest.NewServer(display.NewAPI(display.AnyHealth(r)))
	defer web.Close()

	ctx, cancel := context.WithCancel(context.Background())
	var wg sync.WaitGroup
	defer wg.Wait()
	defer cancel()
	start, _ := wire.EncodeBlock(wire.Block{Kind: wire.KindStart, Block: "lat", T: 0, Lags: refLags, FramePeriod: refPeriod,
		Stimulus: json.RawMessage(fmt.Sprintf(`{"type":"binary","width":%d,"height":%d,"seed":3}`, refSide, refSide))})
	if err := pubc.Publish("bench.lat.block", start); err != nil {
		b.Fatal(err)
	}
	probe := make(chan time.Time, 1)
	want := make(chan struct{}, 1)
	wg.Add(1)
	go func() { // the rig: stream time is wall time since t0
		defer wg.Done()
		rng := rand.New(rand.NewPCG(2, 2))
		ids := refIDs()
		t0 := time.Now()
		tick := time.NewTicker(10 * time.Millisecond)
		defer tick.Stop()
		var frame int64
		lastSpikes := 0.0
		nextFrames := 0.05
		for {
			select {
			case <-ctx.Done():
				return
			case <-tick.C:
			}
			now := time.Since(t0).Seconds()
			if now >= nextFrames {
				data, _ := wire.EncodeFrames(framesBefore("lat", &frame, refPeriod, now))
				_ = pubc.Publish("bench.lat.frames", data)
				nextFrames = now + 0.05
			}
			if now-lastSpikes >= 0.02 {
				s := refSpikes(rng, ids, lastSpikes, now)
				sendProbe := false
				select {
				case <-want:
					sendProbe = true
					s.Unit = append(s.Unit, "probe")
					s.T = append(s.T, math.Nextafter(now, 0))
				default:
				}
				data, _ := wire.EncodeSpikes(s)
				_ = pubc.Publish("bench.lat.spikes", data)
				if sendProbe {
					probe <- time.Now()
				}
				lastSpikes = now
			}
		}
	}()
	// Let the block fill its lags and the first updates pass.
	time.Sleep(2 * time.Second)
	var total time.Duration
	b.ResetTimer()
	for i := range b.N {
		want <- struct{}{}
		sent := <-probe
		for {
			if probeSpikes(b, web.URL) >= int64(i+1) {
				break
			}
			if time.Since(sent) > 10*time.Second {
				b.Fatalf("probe spike %d not in /api/units after 10 s (health %+v)", i+1, r.Health())
			}
			time.Sleep(5 * time.Millisecond)
		}
		total += time.Since(sent)
	}
	b.StopTimer()
	b.ReportMetric(total.Seconds()*1000/float64(b.N), "ms-latency")
	h := r.Health()
	b.ReportMetric(float64(h.Lag)*1000, "ms-update-wait")
	b.ReportMetric(h.UpdateSeconds*1000, "ms-update")
	if len(h.Rejected) != 0 {
		b.Fatalf("rejected %v", h.Rejected)
	}
}

func probeSpikes(b *testing.B, url string) int64 {
	res, err := http.Get(url + "/api/units")
	if err != nil {
		b.Fatal(err)
	}
	defer res.Body.Close()
	var v struct {
		Units []struct {
			ID     string `json:"id"`
			Spikes int64  `json:"spikes"`
		} `json:"units"`
	}
	if err := json.NewDecoder(res.Body).Decode(&v); err != nil {
		b.Fatal(err)
	}
	for _, u := range v.Units {
		if u.ID == "probe" {
			return u.Spikes
		}
	}
	return 0
}

// TestSteadyStateNoAlloc: once the buffers have grown, handling frames and
// spikes messages (decode, binning, estimator bins) does not allocate.
func TestSteadyStateNoAlloc(t *testing.T) {
	msgs, _ := session(t, 6)
	start, _ := json.Marshal(map[string]any{"kind": "start", "block": "bench", "t": 0, "lags": refLags,
		"stimulus": binary(refSide, refSide, 3)})
	for _, sh := range []Shard{{}, {Index: 1, Count: 2}} {
		c, err := NewLoop(Options{Prefix: "bench", Logger: quiet(), UpdateEvery: time.Hour, Shard: sh})
		if err != nil {
			t.Fatal(err)
		}
		feedRaw(c, message{subj: subjBlock, data: start})
		warm := len(msgs) / 2
		for _, m := range msgs[:warm] {
			feedRaw(c, m)
		}
		rest := msgs[warm:]
		i := 0
		allocs := testing.AllocsPerRun(len(rest)-1, func() {
			feedRaw(c, rest[i])
			i++
		})
		h := c.Health()
		if allocs != 0 || len(h.Rejected) != 0 {
			t.Fatalf("shard %v: %.2f allocations per message (rejected %v), want 0", sh, allocs, h.Rejected)
		}
		if n := c.n.bins.Load(); n < 300 {
			t.Fatalf("shard %v: only %d bins: the test did not exercise binning", sh, n)
		}
		if sh.Count == 2 && (c.n.otherShard.Load() == 0 || c.n.spikes.Load() == 0) {
			t.Fatalf("shard %v: %d spikes mapped, %d of other shards; want both", sh, c.n.spikes.Load(), c.n.otherShard.Load())
		}
	}
}

// feedRaw runs one message through the intake and the inline estimator's
// bins, without the update clock.
func feedRaw(c *Loop, m message) {
	_ = c.in.handle(m)
	c.est.drain(c.q)
}
