package main

import (
	"context"
	"encoding/json"
	"io"
	"net/http"
	"regexp"
	"strings"
	"testing"
	"time"

	"livefield/stream/ingest"
	"livefield/stream/natstest"
	"livefield/stream/shards"
)

// TestViewCommand runs `livefield view` against a server on which two
// shard workers of a rig announce themselves, and reads the rig list and
// the rig's merged health over HTTP.
func TestViewCommand(t *testing.T) {
	srv := natstest.Start(t, natstest.Options{})
	for i := range 2 {
		nc := srv.Connect(t)
		sh := ingest.Shard{Index: i, Count: 2}
		r, err := ingest.Start(context.Background(), nc, ingest.Options{Prefix: "livefield.v1", Shard: sh})
		if err != nil {
			t.Fatal(err)
		}
		defer r.Close()
		svc, err := shards.Announce(nc, r, shards.Info{Rig: "v1", Prefix: "livefield.v1", Shard: sh})
		if err != nil {
			t.Fatal(err)
		}
		defer svc.Stop()
	}
	ctx, cancel := context.WithCancel(context.Background())
	out := &syncBuffer{}
	done := make(chan int)
	go func() { done <- runMain(ctx, []string{"view", "--nats", srv.URL(), "--http", "127.0.0.1:0"}, out, out) }()
	defer func() {
		cancel()
		if code := <-done; code != 0 {
			t.Errorf("view exited %d:\n%s", code, out.String())
		}
	}()
	re := regexp.MustCompile(`open http://(\S+)/`)
	var addr string
	deadline := time.Now().Add(20 * time.Second)
	for addr == "" {
		if m := re.FindStringSubmatch(out.String()); m != nil {
			addr = m[1]
		} else if time.Now().After(deadline) {
			t.Fatalf("no address printed:\n%s", out.String())
		}
		time.Sleep(20 * time.Millisecond)
	}
	var health shards.Health
	for {
		resp, err := http.Get("http://" + addr + "/rigs/v1/api/health")
		if err == nil {
			b, _ := io.ReadAll(resp.Body)
			resp.Body.Close()
			if resp.StatusCode == 200 && json.Unmarshal(b, &health) == nil && len(health.Shards) == 2 && len(health.Missing) == 0 {
				break
			}
		}
		if time.Now().After(deadline) {
			t.Fatalf("the merged health never showed both shards: %+v", health)
		}
		time.Sleep(50 * time.Millisecond)
	}
	if health.Shard != "0/2 + 1/2" || !health.Merged || !strings.Contains(health.Prefix, "v1") {
		t.Errorf("merged health %+v", health)
	}
}
