package shards

import (
	"bytes"
	"context"
	"encoding/json"
	"io"
	"net/http"
	"net/http/httptest"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/nats-io/nats.go/jetstream"

	"livefield/online"
	"livefield/replay/session"
	"livefield/stream/ingest"
)

// TestTwoRigsOneCluster maps two rigs (two prefixes) with one durable
// worker each on the three-server cluster, each creating its rig's stream
// with three replicas, and checks that neither sees the other's messages,
// and that the merged front offers both rigs and serves each one's units.
func TestTwoRigsOneCluster(t *testing.T) {
	t0 := time.Now()
	nodes := startCluster(t)
	// Rig rb plays the same session as block B2: a worker that read the
	// other rig's messages would count them twice or mix blocks.
	// The first 10 s of the session and its block end keep the test short.
	short := func() []session.Record {
		all := records(t)
		return append(all[:len(all)/3:len(all)/3], all[len(all)-1])
	}
	recs := map[string][]session.Record{"ra": short(), "rb": short()}
	for i, r := range recs["rb"] {
		recs["rb"][i].Data = bytes.ReplaceAll(r.Data, []byte(`"block":"B1"`), []byte(`"block":"B2"`))
	}
	workers := map[string]*worker{}
	opt := ingest.Options{Durable: true, Replicas: 3}
	for i, rig := range []string{"ra", "rb"} {
		nc := connectTo(t, nodes[i], nodes[(i+1)%3], nodes[(i+2)%3])
		eventually(t, 30*time.Second, "the cluster takes rig "+rig+"'s stream", func() bool {
			r, err := ingest.Start(context.Background(), nc, ingest.Options{Durable: true, Replicas: 3, Prefix: "livefield." + rig})
			if err == nil {
				r.Close()
			}
			return err == nil
		})
		workers[rig] = restartWorker(t, nc, rig, ingest.Shard{}, opt)
	}
	t.Logf("workers up after %v", time.Since(t0).Round(time.Millisecond))
	pub := connectTo(t, nodes[2], nodes[0], nodes[1])
	pjs, err := jetstream.New(pub)
	if err != nil {
		t.Fatal(err)
	}
	for rig, rr := range recs {
		// Asynchronously, every acknowledgement awaited; none may fail here
		// (all servers are up), so the stream keeps the order sent.
		futures := make([]jetstream.PubAckFuture, len(rr))
		for i, r := range rr {
			if futures[i], err = pjs.PublishAsync("livefield."+rig+"."+r.Subject, r.Data, jetstream.WithMsgID(rig+"-"+strconv.Itoa(i))); err != nil {
				t.Fatal(err)
			}
		}
		for i, f := range futures {
			select {
			case <-f.Ok():
			case err := <-f.Err():
				t.Fatalf("rig %s message %d: %v", rig, i, err)
			case <-time.After(30 * time.Second):
				t.Fatalf("rig %s message %d: no acknowledgement", rig, i)
			}
		}
	}
	t.Logf("published after %v", time.Since(t0).Round(time.Millisecond))
	for rig, rr := range recs {
		n := len(rr)
		st, err := pjs.Stream(context.Background(), ingest.StreamName("livefield."+rig))
		if err != nil {
			t.Fatal(err)
		}
		if info := st.CachedInfo(); info.Config.Replicas != 3 || info.State.Msgs != uint64(n) {
			t.Errorf("rig %s: stream with %d replicas holding %d messages, want 3 and %d", rig, info.Config.Replicas, info.State.Msgs, n)
		}
		w := workers[rig]
		got := settleWithin(t, w.rig, uint64(n), 30*time.Second)
		h := w.rig.Health()
		var received uint64
		for _, c := range h.Messages {
			received += c
		}
		// No cross-talk: exactly its own messages, and the estimates of a
		// single worker fed only them.
		if received != uint64(n) || h.Processed != uint64(n) {
			t.Errorf("rig %s: received %d, processed %d messages, its rig sent %d", rig, received, h.Processed, n)
		}
		want := single(t, "livefield."+rig, rr)
		if !sameSpikes(got, want) || got.Block != want.Block {
			t.Errorf("rig %s: unit spike counts differ from a worker fed its messages only", rig)
		}
	}

	t.Logf("checked after %v", time.Since(t0).Round(time.Millisecond))
	// The front lists both rigs and serves each rig's own page.
	front := NewFront(connectTo(t, nodes[1], nodes[2]), FrontOptions{View: ViewOptions{Poll: 200 * time.Millisecond, Timeout: 10 * time.Second}})
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan struct{})
	go func() { front.Run(ctx); close(done) }()
	defer func() { cancel(); <-done }()
	ts := httptest.NewServer(front)
	defer ts.Close()
	eventually(t, 10*time.Second, "the front finds both rigs", func() bool { return len(front.Rigs()) == 2 })
	page := get(t, ts.URL+"/")
	for _, rig := range []string{"ra", "rb"} {
		if !strings.Contains(page, `href="rigs/`+rig+`/"`) {
			t.Errorf("the rig selector has no link to %s:\n%s", rig, page)
		}
	}
	for rig, rr := range recs {
		want := single(t, "livefield."+rig, rr)
		eventually(t, 10*time.Second, "rig "+rig+"'s merged units", func() bool {
			var s online.Snapshot
			if json.Unmarshal([]byte(get(t, ts.URL+"/rigs/"+rig+"/api/units")), &s) != nil {
				return false
			}
			return s.Block == want.Block && len(s.Units) == len(want.Units) && s.Bins == want.Bins && sameSpikes(&s, want)
		})
	}
}

func sameSpikes(a, b *online.Snapshot) bool {
	if a == nil || b == nil || len(a.Units) != len(b.Units) {
		return false
	}
	n := map[string]int64{}
	for _, u := range b.Units {
		n[u.ID] = u.Spikes
	}
	for _, u := range a.Units {
		if c, ok := n[u.ID]; !ok || c != u.Spikes {
			return false
		}
	}
	return true
}

func get(t *testing.T, url string) string {
	t.Helper()
	resp, err := http.Get(url)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	b, err := io.ReadAll(resp.Body)
	if err != nil {
		t.Fatal(err)
	}
	return string(b)
}
