package main

import (
	"bytes"
	"context"
	"os"
	"regexp"
	"sync"
	"testing"
	"time"
)

// syncBuffer is a bytes.Buffer safe for one writer and one reader.
type syncBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (s *syncBuffer) Write(p []byte) (int, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.Write(p)
}
func (s *syncBuffer) String() string { s.mu.Lock(); defer s.mu.Unlock(); return s.b.String() }

// TestDemo runs the demo in process: it serves bins from the embedded
// server within seconds, and a cancelled context (Ctrl-C) stops everything
// and removes the JetStream store.
func TestDemo(t *testing.T) {
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	var out, errs syncBuffer
	code := make(chan int, 1)
	go func() { code <- runMain(ctx, []string{"demo", "--http", "127.0.0.1:0", "--units", "12"}, &out, &errs) }()

	addrRe := regexp.MustCompile(`open http://(\S+)/`)
	storeRe := regexp.MustCompile(`JetStream store (\S+)\)`)
	var addr, store string
	deadline := time.Now().Add(20 * time.Second)
	for addr == "" {
		if m := addrRe.FindStringSubmatch(out.String()); m != nil {
			addr = m[1]
		}
		if time.Now().After(deadline) {
			t.Fatalf("no URL printed after 20 s:\n%s\n%s", out.String(), errs.String())
		}
		time.Sleep(10 * time.Millisecond)
	}
	if m := storeRe.FindStringSubmatch(out.String()); m != nil {
		store = m[1]
	} else {
		t.Fatalf("store directory not printed:\n%s", out.String())
	}
	var health struct {
		Bins  uint64 `json:"bins"`
		Block string `json:"block"`
		Units int    `json:"units"`
	}
	for {
		getJSON(t, "http://"+addr+"/api/health", &health)
		if health.Bins > 0 && health.Units > 0 {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("no bins after 20 s: %+v", health)
		}
		time.Sleep(20 * time.Millisecond)
	}
	if health.Block != "demo-1" {
		t.Errorf("block %q, want demo-1", health.Block)
	}
	cancel()
	select {
	case c := <-code:
		if c != 0 {
			t.Fatalf("demo exit %d after cancel:\n%s", c, errs.String())
		}
	case <-time.After(15 * time.Second):
		t.Fatal("demo did not stop within 15 s of the cancel")
	}
	if _, err := os.Stat(store); !os.IsNotExist(err) {
		t.Errorf("store %s still there after the demo stopped (%v)", store, err)
	}
}
