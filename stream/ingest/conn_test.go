package ingest

import (
	"encoding/json"
	"net"
	"testing"
	"time"

	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nats.go"
)

// TestHealthJSON: the counters encode before any data arrived (no NaN
// reaches encoding/json).
func TestHealthJSON(t *testing.T) {
	srv := startServer(t)
	r := startRig(t, connect(t, srv), Options{Prefix: "test.json"})
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
	opts := &server.Options{Host: "127.0.0.1", Port: server.RANDOM_PORT, NoSigs: true, NoLog: true}
	srv, err := server.NewServer(opts)
	if err != nil {
		t.Fatal(err)
	}
	go srv.Start()
	if !srv.ReadyForConnections(10 * time.Second) {
		t.Fatal("not ready")
	}
	url := srv.ClientURL()
	port := srv.Addr().(*net.TCPAddr).Port
	nc, err := nats.Connect(url, nats.MaxReconnects(-1), nats.ReconnectWait(20*time.Millisecond))
	if err != nil {
		t.Fatal(err)
	}
	defer nc.Close()
	r := startRig(t, nc, Options{Prefix: "test.reconnect"})
	poll := func(what string, cond func(Health) bool) Health { t.Helper(); return pollHealth(t, r, what, cond) }
	poll("connected", func(h Health) bool { return h.Connection == "CONNECTED" })

	srv.Shutdown()
	srv.WaitForShutdown()
	poll("the outage", func(h Health) bool { return h.Connection == "RECONNECTING" })

	again := *opts
	again.Port = port
	srv2, err := server.NewServer(&again)
	if err != nil {
		t.Fatal(err)
	}
	go srv2.Start()
	defer func() { srv2.Shutdown(); srv2.WaitForShutdown() }()
	if !srv2.ReadyForConnections(10 * time.Second) {
		t.Fatal("restarted server not ready")
	}
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
