package shards

import (
	"context"
	"errors"
	"io"
	"strings"
	"testing"
	"time"

	"github.com/nats-io/nats.go"

	"livefield/online"
	"livefield/replay/session"
	"livefield/stream/ingest"
)

// sessionPath is the committed 30 s session of the synthetic rig.
const sessionPath = "../../testdata/sessions/synth-30s.lfs"

// records reads the committed session.
func records(t *testing.T) []session.Record {
	t.Helper()
	f, err := session.Open(sessionPath)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	var out []session.Record
	for {
		r, err := f.Next()
		if errors.Is(err, io.EOF) {
			return out
		}
		if err != nil {
			t.Fatal(err)
		}
		out = append(out, r.Clone())
	}
}

// running drops the block's end from recs, so that the block is still
// running at the end of them (controls apply to a running block).
func running(t *testing.T, recs []session.Record) []session.Record {
	t.Helper()
	last := recs[len(recs)-1]
	if last.Subject != "block" || !strings.Contains(string(last.Data), `"end"`) {
		t.Fatalf("the session does not end with a block end: %s %s", last.Subject, last.Data)
	}
	return recs[:len(recs)-1]
}

// publishCore publishes the records under prefix on core NATS, in order.
func publishCore(t *testing.T, nc *nats.Conn, prefix string, recs []session.Record) {
	t.Helper()
	for _, r := range recs {
		if err := nc.Publish(prefix+"."+r.Subject, r.Data); err != nil {
			t.Fatal(err)
		}
	}
	if err := nc.Flush(); err != nil {
		t.Fatal(err)
	}
}

// worker is one shard worker of a test: the ingest and its announcement.
type worker struct {
	rig *ingest.Rig
	svc *Service
}

func startWorker(t *testing.T, nc *nats.Conn, rigName string, sh ingest.Shard, opt ingest.Options) *worker {
	t.Helper()
	opt.Prefix = "livefield." + rigName
	opt.Shard = sh
	r, err := ingest.Start(context.Background(), nc, opt)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = r.Close() })
	svc, err := Announce(nc, r, Info{Rig: rigName, Prefix: opt.Prefix, Shard: sh})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = svc.Stop() })
	return &worker{rig: r, svc: svc}
}

// settle waits until the rig has processed n messages and returns its
// snapshot with every closed bin folded in.
func settle(t *testing.T, r *ingest.Rig, n uint64) *online.Snapshot {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
	defer cancel()
	if !r.WaitProcessed(ctx, n) {
		t.Fatalf("%s: processed %d of %d messages", r.Prefix(), r.Health().Processed, n)
	}
	return r.Sync()
}

// eventually polls cond until it holds or the deadline passes.
func eventually(t *testing.T, within time.Duration, what string, cond func() bool) {
	t.Helper()
	deadline := time.Now().Add(within)
	for !cond() {
		if time.Now().After(deadline) {
			t.Fatalf("not within %v: %s", within, what)
		}
		time.Sleep(20 * time.Millisecond)
	}
}
