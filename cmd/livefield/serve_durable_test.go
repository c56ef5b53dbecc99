package main

import (
	"context"
	"regexp"
	"strings"
	"testing"
	"time"

	"livefield/stream/natstest"
)

// TestServeDurable runs serve against the embedded JetStream server with
// a shard and a URL carrying a password: it reads the rig durably, shows
// the shard and the stream in /api/health, and never prints the password.
// Without JetStream (--no-jetstream) it says plainly what is lost.
func TestServeDurable(t *testing.T) {
	srv := natstest.Start(t, natstest.Options{JetStream: true})
	url := strings.Replace(srv.URL(), "nats://", "nats://lab:hunter2secret@", 1)
	for _, tc := range []struct {
		name    string
		args    []string
		durable bool
		shard   string
		say     string // in the output
	}{
		{"durable shard", []string{"--shard", "1/2"}, true, "1/2", "durable: JetStream stream LIVEFIELD_R9, consumer LIVEFIELD_R9_SHARD_1_OF_2"},
		{"core NATS", []string{"--no-jetstream"}, false, "0/1", "messages sent during a disconnect are lost"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			ctx, cancel := context.WithCancel(context.Background())
			var out syncBuffer
			code := make(chan int, 1)
			args := append([]string{"serve", "--nats", url, "--rig", "r9", "--http", "127.0.0.1:0"}, tc.args...)
			go func() { code <- runMain(ctx, args, &out, &out) }()
			re := regexp.MustCompile(`open http://(\S+)/`)
			var addr string
			for deadline := time.Now().Add(20 * time.Second); addr == ""; time.Sleep(10 * time.Millisecond) {
				if m := re.FindStringSubmatch(out.String()); m != nil {
					addr = m[1]
				} else if time.Now().After(deadline) {
					cancel()
					t.Fatalf("serve did not start:\n%s", out.String())
				}
			}
			var h struct {
				Durable bool   `json:"durable"`
				Shard   string `json:"shard"`
				Stream  string `json:"stream"`
				Warning string `json:"warning"`
			}
			getJSON(t, "http://"+addr+"/api/health", &h)
			cancel()
			if c := <-code; c != 0 {
				t.Errorf("exit %d:\n%s", c, out.String())
			}
			o := out.String()
			if h.Durable != tc.durable || h.Shard != tc.shard || (tc.durable && h.Stream != "LIVEFIELD_R9") || (!tc.durable && h.Warning == "") {
				t.Errorf("/api/health %+v, want durable %v, shard %s", h, tc.durable, tc.shard)
			}
			if !strings.Contains(o, tc.say) {
				t.Errorf("output lacks %q:\n%s", tc.say, o)
			}
			if strings.Contains(o, "hunter2secret") {
				t.Errorf("the NATS password was printed:\n%s", o)
			}
		})
	}
}
