package natstest_test

import (
	"context"
	"os"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"livefield/stream/natstest"
)

// TestRestart: a client connected before a restart publishes after it on
// the same URL, and a JetStream stream keeps its messages across it.
func TestRestart(t *testing.T) {
	s := natstest.Start(t, natstest.Options{JetStream: true})
	url := s.URL()
	reconnected := make(chan struct{}, 1)
	nc := s.Connect(t, nats.ReconnectHandler(func(*nats.Conn) { reconnected <- struct{}{} }))
	js, err := jetstream.New(nc)
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 20*time.Second)
	defer cancel()
	if _, err := js.CreateStream(ctx, jetstream.StreamConfig{Name: "T", Subjects: []string{"t.>"}}); err != nil {
		t.Fatal(err)
	}
	if _, err := js.Publish(ctx, "t.a", []byte("before")); err != nil {
		t.Fatal(err)
	}
	s.Restart()
	if s.URL() != url {
		t.Fatalf("URL %s after the restart, was %s", s.URL(), url)
	}
	select {
	case <-reconnected:
	case <-ctx.Done():
		t.Fatal("the client did not reconnect within 20 s")
	}
	if _, err := js.Publish(ctx, "t.a", []byte("after")); err != nil {
		t.Fatal(err)
	}
	st, err := js.Stream(ctx, "T")
	if err != nil {
		t.Fatal(err)
	}
	info, err := st.Info(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if info.State.Msgs != 2 {
		t.Errorf("the stream holds %d messages after the restart, want 2", info.State.Msgs)
	}
}

// TestNew: a server made outside a test serves clients until Close, which
// removes its JetStream store.
func TestNew(t *testing.T) {
	s, err := natstest.New(natstest.Options{JetStream: true})
	if err != nil {
		t.Fatal(err)
	}
	nc, err := nats.Connect(s.URL())
	if err != nil {
		s.Close()
		t.Fatal(err)
	}
	defer nc.Close()
	store := s.NATS().JetStreamConfig().StoreDir
	s.Close()
	if s.NATS() != nil {
		t.Fatal("server still running after Close")
	}
	if _, err := os.Stat(store); !os.IsNotExist(err) {
		t.Fatalf("store %s not removed: %v", store, err)
	}
}
