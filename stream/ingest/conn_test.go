package ingest

import (
	"encoding/json"
	"log/slog"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"livefield/stream/natstest"
	"livefield/stream/wire"
)

// TestHealthJSON: the counters encode before any data arrived (no NaN
// reaches encoding/json).
func TestHealthJSON(t *testing.T) {
	srv := natstest.Start(t, natstest.Options{})
	r := startRig(t, srv.Connect(t), Options{Prefix: "test.json"})
	b, err := json.Marshal(r.Health())
	if err != nil {
		t.Fatalf("health does not encode: %v", err)
	}
	var v map[string]any
	if err := json.Unmarshal(b, &v); err != nil || v["stream_t"] != nil || v["prefix"] != "test.json" {
		t.Fatalf("health %s: want prefix test.json and stream_t null", b)
	}
}

// TestReconnect restarts the server under a running rig, as nats-server's
// own tests do: the health shows the outage and the reconnect, and the
// stream goes on.
func TestReconnect(t *testing.T) {
	srv := natstest.Start(t, natstest.Options{})
	nc := srv.Connect(t)
	r := startRig(t, nc, Options{Prefix: "test.reconnect"})
	poll := func(what string, cond func(Health) bool) Health { t.Helper(); return pollHealth(t, r, what, cond) }
	poll("connected", func(h Health) bool { return h.Connection == "CONNECTED" })

	srv.Stop()
	poll("the outage", func(h Health) bool { return h.Connection == "RECONNECTING" })

	srv.Restart() // on the same port
	h := poll("the reconnect", func(h Health) bool { return h.Connection == "CONNECTED" && h.Reconnects == 1 })
	if h.Reconnects != 1 {
		t.Fatalf("reconnects %d, want 1", h.Reconnects)
	}
	// The subscription came back with the connection.
	p := &publisher{t: t, nc: nc, prefix: "test.reconnect"}
	feed(t, p, "b1", 120, [2]string{"on", "odd"})
	if h := p.settle(r); h.Block != "b1" || h.Bins == 0 {
		t.Fatalf("after the reconnect: block %q, %d bins; want b1 with bins", h.Block, h.Bins)
	}
}

// syncWriter collects log output from the owner goroutine.
type syncWriter struct {
	mu sync.Mutex
	b  strings.Builder
}

func (w *syncWriter) Write(p []byte) (int, error) {
	w.mu.Lock()
	defer w.mu.Unlock()
	return w.b.Write(p)
}
func (w *syncWriter) lines(substr string) int {
	w.mu.Lock()
	defer w.mu.Unlock()
	return strings.Count(w.b.String(), substr)
}

// TestRejectionLogRate: every rejection is counted, but one reason is
// logged at most once per 5 s of the injected clock.
func TestRejectionLogRate(t *testing.T) {
	srv := natstest.Start(t, natstest.Options{})
	nc := srv.Connect(t)
	var now atomic.Int64
	var logs syncWriter
	r := startRig(t, nc, Options{Prefix: "test.log", Now: func() time.Time { return time.Unix(0, now.Load()) },
		Logger: slog.New(slog.NewTextHandler(&logs, nil))})
	p := &publisher{t: t, nc: nc, prefix: "test.log"}
	for range 5 {
		p.raw("spikes", []byte(`{"unit":`))
	}
	h := p.settle(r)
	if h.Rejected[wire.ReasonSyntax] != 5 || logs.lines("reason=syntax") != 1 {
		t.Fatalf("%d rejections, %d log lines; want 5 and 1", h.Rejected[wire.ReasonSyntax], logs.lines("reason=syntax"))
	}
	now.Add(int64(logEvery))
	p.raw("spikes", []byte(`{"unit":`))
	p.settle(r)
	if n := logs.lines("reason=syntax"); n != 2 {
		t.Fatalf("%d log lines after 5 s more, want 2", n)
	}
}

// TestQueueFullWaits holds the intake goroutine on purpose: the NATS
// callback waits for room in the queue instead of dropping, so every
// message is handled once the intake runs again (rig data is never dropped
// by livefield itself; only nats.go's pending limits can drop, counted).
func TestQueueFullWaits(t *testing.T) {
	srv := natstest.Start(t, natstest.Options{})
	nc := srv.Connect(t)
	r := startRig(t, nc, Options{Prefix: "test.queue", Queue: 1})
	started, release := make(chan struct{}), make(chan struct{})
	var once sync.Once
	free := func() { once.Do(func() { close(release) }) }
	t.Cleanup(free) // before the rig's Close, which needs the intake
	go r.do(func() { close(started); <-release })
	<-started // the intake goroutine is held
	p := &publisher{t: t, nc: nc, prefix: "test.queue"}
	for range 4 {
		p.raw("control", []byte(`{"command":"reset"}`))
	}
	if err := nc.Flush(); err != nil {
		t.Fatal(err)
	}
	// One message in the queue, one in the waiting callback, two in
	// nats.go's pending buffer.
	pollHealth(t, r, "the callback waiting", func(h Health) bool { return h.Messages["control"] == 2 })
	free()
	h := pollHealth(t, r, "all four handled", func(h Health) bool { return h.Processed == 4 })
	if h.Resets != 4 || len(h.Rejected) != 0 || h.SlowConsumer != 0 {
		t.Fatalf("resets %d, rejected %v, slow-consumer drops %d; want 4, none, 0", h.Resets, h.Rejected, h.SlowConsumer)
	}
}
