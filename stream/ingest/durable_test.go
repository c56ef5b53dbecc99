package ingest

import (
	"context"
	"encoding/json"
	"fmt"
	"math"
	"net/http/httptest"
	"runtime"
	"slices"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"livefield/display"
	"livefield/online"
	"livefield/replay/synth"
	"livefield/stream/natstest"
	"livefield/stream/stimulus"
	"livefield/stream/wire"
)

// jsPublisher publishes with JetStream acknowledgements, retrying (same
// Nats-Msg-Id, so the stream stores a retry once) until the server has
// stored each message: what it returns from is acknowledged.
type jsPublisher struct {
	t      testing.TB
	js     jetstream.JetStream
	prefix string
	n      int
}

func newJSPublisher(t testing.TB, nc *nats.Conn, prefix string) *jsPublisher {
	js, err := jetstream.New(nc)
	if err != nil {
		t.Fatal(err)
	}
	return &jsPublisher{t: t, js: js, prefix: prefix}
}

// publish is safe from one goroutine; a failure ends the test (Errorf and
// Goexit, so it may run outside the test goroutine).
func (p *jsPublisher) publish(subject string, data []byte) {
	p.n++
	id := fmt.Sprintf("%s-%d", p.prefix, p.n)
	deadline := time.Now().Add(30 * time.Second)
	for {
		ctx, cancel := context.WithTimeout(context.Background(), time.Second)
		_, err := p.js.Publish(ctx, wire.Subject(p.prefix, subject), data, jetstream.WithMsgID(id))
		cancel()
		if err == nil {
			return
		}
		if time.Now().After(deadline) {
			p.t.Errorf("message %d not stored after 30 s: %v", p.n, err)
			runtime.Goexit()
		}
		time.Sleep(20 * time.Millisecond)
	}
}

func (p *jsPublisher) msg(subject string, b []byte, err error) {
	p.t.Helper()
	if err != nil {
		p.t.Fatal(err)
	}
	p.publish(subject, b)
}

// numbered publishes frames from…to−1 (frame i at t0 + i/60) in batches of
// 6, each batch followed by one spike per unit u0…u7 inside it; it adds
// the spikes sent to sent.
func (p *jsPublisher) numbered(block string, from, to int64, sent map[string]int64) {
	p.t.Helper()
	for lo := from; lo < to; lo += 6 {
		b, err := wire.EncodeFrames(frameRun(block, lo, min(lo+6, to), t0))
		p.msg(wire.SubjectFrames, b, err)
		var s wire.Spikes
		for u := range 8 {
			id := fmt.Sprintf("u%d", u)
			s.Unit = append(s.Unit, id)
			s.T = append(s.T, frameTime(t0, lo)+float64(u)*0.01)
			sent[id]++
		}
		b, err = wire.EncodeSpikes(s)
		p.msg(wire.SubjectSpikes, b, err)
	}
}

func (p *jsPublisher) start(block string) {
	p.t.Helper()
	b, err := encodeStart(block, binary(8, 8, 7), t0)
	p.msg(wire.SubjectBlock, b, err)
}

func (p *jsPublisher) end(block string, t float64) {
	p.t.Helper()
	b, err := encodeEnd(block, t)
	p.msg(wire.SubjectBlock, b, err)
}

// ended waits (20 s deadline) until r has processed the end of block.
func ended(t testing.TB, r *Rig, block string) Health {
	t.Helper()
	pollHealth(t, r, "the block end", func(h Health) bool { return h.Block == block && h.BlockState == "ended" })
	r.Sync()
	return r.Health()
}

// TestDurableServerRestart restarts the JetStream server mid-block, on the
// same port and store, while the rig publishes: the ingest reconnects and
// every acknowledged spike is counted exactly once (set arithmetic per
// unit: lost = sent − counted, extra = counted − sent, both empty).
func TestDurableServerRestart(t *testing.T) {
	js := natstest.Start(t, natstest.Options{JetStream: true})
	const prefix = "test.jsrestart"
	r := startRig(t, js.Connect(t), Options{Prefix: prefix, Durable: true})
	p := newJSPublisher(t, js.Connect(t), prefix)
	sent := map[string]int64{}
	p.start("b1")
	// The rig publishes throughout; the server goes down and comes back
	// after the first 300 frames, while the publisher goes on (retrying
	// until stored) and the ingest may still be taking the first half.
	half, done := make(chan struct{}), make(chan struct{})
	go func() {
		defer close(done)
		p.numbered("b1", 0, 300, sent)
		close(half)
		p.numbered("b1", 300, 600, sent)
		p.end("b1", frameTime(t0, 600))
	}()
	<-half
	js.Restart()
	<-done
	h := ended(t, r, "b1")

	got := spikesOf(r.Snapshot())
	var lost, extra []string
	for id, n := range sent {
		if got[id] < n {
			lost = append(lost, fmt.Sprintf("%s: %d", id, n-got[id]))
		}
	}
	for id, n := range got {
		if n > sent[id] {
			extra = append(extra, fmt.Sprintf("%s: %d", id, n-sent[id]))
		}
	}
	var total int64
	for _, n := range sent {
		total += n
	}
	if len(lost) != 0 || len(extra) != 0 || h.SpikesTotal != uint64(total) || h.Bins != 600 {
		t.Fatalf("lost %v, counted twice %v; spikes %d of %d, bins %d of 600 (health %+v)", lost, extra, h.SpikesTotal, total, h.Bins, h)
	}
	// nats.go calls the reconnect handler on its own goroutine: the count
	// may trail the messages that came after the reconnection.
	for deadline := time.Now().Add(5 * time.Second); h.Reconnects < 1 && time.Now().Before(deadline); h = r.Health() {
		time.Sleep(10 * time.Millisecond)
	}
	if h.Reconnects < 1 || !h.Durable || h.Processed != uint64(p.n) {
		t.Fatalf("reconnects %d, durable %v, processed %d of %d stored", h.Reconnects, h.Durable, h.Processed, p.n)
	}
	t.Logf("server restarted: %d spikes in %d messages, none lost; %d redeliveries skipped, %d consumer recreations",
		total, p.n, h.Duplicates, h.Resyncs)
	// Every processed message is acknowledged: the consumer's floor is the
	// block end, at the latest after one ack wait (an acknowledgement lost
	// around the restart brings a redelivery, which is acknowledged).
	cons, err := jetstream.New(js.Connect(t))
	if err != nil {
		t.Fatal(err)
	}
	deadline := time.Now().Add(consumerAckWait + 20*time.Second)
	for {
		c, err := cons.Consumer(context.Background(), h.Stream, h.Consumer)
		if err != nil {
			t.Fatal(err)
		}
		info, err := c.Info(context.Background())
		if err != nil {
			t.Fatal(err)
		}
		if info.AckFloor.Stream == h.StreamSeq {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("ack floor %d, last processed %d", info.AckFloor.Stream, h.StreamSeq)
		}
		time.Sleep(10 * time.Millisecond)
	}
}

// sameUnits fails unless want's units are in got with ridge weights and
// STA within tol (0: bit for bit) and equal spike counts.
func sameUnits(t *testing.T, got, want *online.Snapshot, ids []string, tol float64) float64 {
	t.Helper()
	worst := 0.0
	for _, id := range ids {
		w, ok1 := want.Detail(id)
		g, ok2 := got.Detail(id)
		if !ok1 || !ok2 || len(w.Ridge) == 0 || len(g.Ridge) != len(w.Ridge) || len(g.STA) != len(w.STA) || g.Spikes != w.Spikes {
			t.Fatalf("unit %s: missing, of another size or other spikes", id)
		}
		for i := range w.Ridge {
			d := math.Abs(float64(g.Ridge[i] - w.Ridge[i]))
			if !(d <= tol) {
				t.Fatalf("unit %s ridge[%d] = %v, want %v (tolerance %g)", id, i, g.Ridge[i], w.Ridge[i], tol)
			}
			worst = max(worst, d)
		}
		for i := range w.STA {
			if d := math.Abs(float64(g.STA[i] - w.STA[i])); !(d <= tol) {
				t.Fatalf("unit %s sta[%d] = %v, want %v (tolerance %g)", id, i, g.STA[i], w.STA[i], tol)
			}
		}
	}
	return worst
}

func unitIDs(s *online.Snapshot) []string {
	var ids []string
	for _, u := range s.Units {
		ids = append(ids, u.ID)
	}
	slices.Sort(ids)
	return ids
}

// TestDurableMapperRestart kills a mapper mid-block (its connection closed
// before it could acknowledge, then the process state dropped) and starts
// a new one: it rebuilds the block from its start message and ends with
// the estimates of a mapper that ran throughout.
func TestDurableMapperRestart(t *testing.T) {
	js := natstest.Start(t, natstest.Options{JetStream: true})
	const prefix = "test.jskill"
	whole := startRig(t, js.Connect(t), Options{Prefix: prefix, Durable: true, Consumer: "WHOLE"})
	p := newJSPublisher(t, js.Connect(t), prefix)
	sent := map[string]int64{}
	p.start("b1")
	p.numbered("b1", 0, 300, sent)

	killedConn := js.Connect(t)
	killed := startRig(t, killedConn, Options{Prefix: prefix, Durable: true})
	pollHealth(t, killed, "the first half", func(h Health) bool { return h.Processed == uint64(p.n) })
	killedConn.Close()
	killed.Close()

	p.numbered("b1", 300, 450, sent)
	again := startRig(t, js.Connect(t), Options{Prefix: prefix, Durable: true})
	if h := again.Health(); h.StartSeq != 1 {
		t.Fatalf("restarted at stream sequence %d, want 1 (the block start)", h.StartSeq)
	}
	p.numbered("b1", 450, 600, sent)
	p.end("b1", frameTime(t0, 600))
	ha, hw := ended(t, again, "b1"), ended(t, whole, "b1")
	if ha.Bins != hw.Bins || ha.SpikesTotal != hw.SpikesTotal || ha.Processed != hw.Processed {
		t.Fatalf("restarted: %d bins, %d spikes, %d messages; uninterrupted: %d, %d, %d", ha.Bins, ha.SpikesTotal, ha.Processed, hw.Bins, hw.SpikesTotal, hw.Processed)
	}
	ids := unitIDs(whole.Snapshot())
	if len(ids) != 8 {
		t.Fatalf("units %v, want u0…u7", ids)
	}
	// Same messages in the same order: the same exact ridge. Which bins
	// fall into which update follows the machine's timing (the estimator
	// folds whatever has queued up), so the two differ by round-off only:
	// weights of order 1e-2 from a well-conditioned λI + XᵀX (λ is 100×
	// the pixel variance) agree to far better than 1e-12.
	sameUnits(t, again.Snapshot(), whole.Snapshot(), ids, 1e-12)
}

// TestShards runs two workers (shards 0/2 and 1/2) and one unsharded
// worker on one JetStream stream of a synthetic population: every unit is
// estimated by exactly one shard, identically to the unsharded worker,
// and the other shard's spikes are ignored and counted, not rejected.
func TestShards(t *testing.T) {
	js := natstest.Start(t, natstest.Options{JetStream: true})
	const prefix = "test.shards"
	nc := js.Connect(t)
	all := startRig(t, nc, Options{Prefix: prefix, Durable: true, Queue: 1 << 14})
	s0 := startRig(t, nc, Options{Prefix: prefix, Durable: true, Queue: 1 << 14, Shard: Shard{0, 2}})
	s1 := startRig(t, nc, Options{Prefix: prefix, Durable: true, Queue: 1 << 14, Shard: Shard{1, 2}})
	if names := []string{all.Health().Consumer, s0.Health().Consumer, s1.Health().Consumer}; names[0] == names[1] || names[1] == names[2] {
		t.Fatalf("consumer names %v are not distinct", names)
	}
	spec := stimulus.Spec{Type: "binary", Width: 8, Height: 8, Seed: 11}
	src, err := stimulus.Open(spec, "")
	if err != nil {
		t.Fatal(err)
	}
	rig, err := synth.New(synth.Scenario{Width: 8, Height: 8, Lags: 8, Seed: 5}, src)
	if err != nil {
		t.Fatal(err)
	}
	if err := synth.Publish(context.Background(), js.Connect(t), prefix, rig, synth.PublishOptions{Stimulus: spec, Duration: 60, Speed: 0}); err != nil {
		t.Fatal(err)
	}
	var h [3]Health
	for i, r := range []*Rig{all, s0, s1} {
		h[i] = ended(t, r, "B1")
		if len(h[i].Rejected) != 0 {
			t.Fatalf("worker %s rejected %v", h[i].Shard, h[i].Rejected)
		}
	}
	ids := unitIDs(all.Snapshot())
	ids0, ids1 := unitIDs(s0.Snapshot()), unitIDs(s1.Snapshot())
	union := slices.Sorted(slices.Values(append(slices.Clone(ids0), ids1...)))
	if len(ids) < 8 || !slices.Equal(union, ids) || len(ids0) == 0 || len(ids1) == 0 {
		t.Fatalf("shard 0 has %v, shard 1 %v; together they must be %v, each once", ids0, ids1, ids)
	}
	for _, id := range ids0 {
		if ShardOf(id, 2) != 0 {
			t.Fatalf("unit %s (shard %d) estimated by shard 0", id, ShardOf(id, 2))
		}
	}
	if h[1].SpikesTotal+h[2].SpikesTotal != h[0].SpikesTotal || h[1].OtherShardSpikes != h[2].SpikesTotal || h[1].Bins != h[0].Bins {
		t.Fatalf("spikes %d + %d (ignored %d, %d), want %d; bins %d, want %d",
			h[1].SpikesTotal, h[2].SpikesTotal, h[1].OtherShardSpikes, h[2].OtherShardSpikes, h[0].SpikesTotal, h[1].Bins, h[0].Bins)
	}
	if h[1].Shard != "0/2" || h[2].Shard != "1/2" || h[0].Shard != "0/1" {
		t.Fatalf("shards %q %q %q", h[0].Shard, h[1].Shard, h[2].Shard)
	}
	w0 := sameUnits(t, s0.Snapshot(), all.Snapshot(), ids0, 1e-12)
	w1 := sameUnits(t, s1.Snapshot(), all.Snapshot(), ids1, 1e-12)
	t.Logf("%d units: %d on shard 0, %d on shard 1; largest ridge difference from one worker %.3g", len(ids), len(ids0), len(ids1), max(w0, w1))
}

// TestSlowConsumer holds the intake goroutine with a one-message queue and
// small pending limits on core NATS: nats.go drops what overflows, and the
// drops and the episode show in /api/health.
func TestSlowConsumer(t *testing.T) {
	srv := natstest.Start(t, natstest.Options{})
	nc := srv.Connect(t)
	r := startRig(t, nc, Options{Prefix: "test.slow", Queue: 1, PendingMsgs: 4, PendingBytes: 1 << 20})
	started, release := make(chan struct{}), make(chan struct{})
	var once sync.Once
	free := func() { once.Do(func() { close(release) }) }
	t.Cleanup(free) // before the rig's Close, which needs the intake
	go r.do(func() { close(started); <-release })
	<-started
	p := &publisher{t: t, nc: srv.Connect(t), prefix: "test.slow"}
	for range 50 {
		p.raw("control", []byte(`{"command":"reset"}`))
	}
	if err := p.nc.Flush(); err != nil {
		t.Fatal(err)
	}
	// The queue holds 1 message, the callback waits with a second one, and
	// nats.go keeps 4 pending: the other 44 overflow in nats.go.
	pollHealth(t, r, "slow-consumer drops", func(h Health) bool { return h.SlowConsumer >= 40 })
	free()
	h := pollHealth(t, r, "the episode", func(h Health) bool { return h.SlowConsumerEvents >= 1 })

	web := httptest.NewServer(display.NewAPI(display.AnyHealth(r)))
	defer web.Close()
	res, err := web.Client().Get(web.URL + "/api/health")
	if err != nil {
		t.Fatal(err)
	}
	defer res.Body.Close()
	var v struct {
		Drops   int    `json:"slow_consumer_drops"`
		Events  uint64 `json:"slow_consumer_events"`
		Durable bool   `json:"durable"`
		Warning string `json:"warning"`
	}
	if err := json.NewDecoder(res.Body).Decode(&v); err != nil {
		t.Fatal(err)
	}
	if v.Drops < 40 || v.Events < 1 || v.Durable || v.Warning != CoreWarning {
		t.Fatalf("/api/health: %+v (counters %+v); want ≥ 40 drops, an episode, durable false and the core-NATS warning", v, h)
	}
}

// TestDurableNeedsJetStream: asking for a durable ingest from a server
// without JetStream is a clear error, and HasJetStream says why.
func TestDurableNeedsJetStream(t *testing.T) {
	nc := natstest.Start(t, natstest.Options{}).Connect(t)
	if ok, err := HasJetStream(context.Background(), nc); ok || err != nil {
		t.Fatalf("HasJetStream on a server without it: %v, %v", ok, err)
	}
	_, err := Start(context.Background(), nc, Options{Prefix: "test.nojs", Durable: true, Logger: quiet()})
	if err == nil || err.Error() != "ingest: the NATS server has no JetStream; run on core NATS instead (messages sent during a disconnect are then lost)" {
		t.Fatalf("Start: %v", err)
	}
	js := natstest.Start(t, natstest.Options{JetStream: true})
	if ok, err := HasJetStream(context.Background(), js.Connect(t)); !ok || err != nil {
		t.Fatalf("HasJetStream with JetStream: %v, %v", ok, err)
	}
}
