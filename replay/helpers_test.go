package replay

import (
	"context"
	"errors"
	"io"
	"math"
	"os"
	"path/filepath"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats.go"

	"livefield/online"
	"livefield/replay/session"
	"livefield/replay/synth"
	"livefield/stream/natstest"
	"livefield/stream/stimulus"
)

// startNATS runs an embedded server on a random loopback port and
// connects to it.
func startNATS(t testing.TB) *nats.Conn {
	t.Helper()
	return natstest.Start(t, natstest.Options{}).Connect(t)
}

// vclock is a virtual wall clock advanced by the publisher's sleeps.
type vclock struct {
	mu sync.Mutex
	t  time.Time
}

func (c *vclock) Now() time.Time { c.mu.Lock(); defer c.mu.Unlock(); return c.t }
func (c *vclock) add(d time.Duration) {
	c.mu.Lock()
	c.t = c.t.Add(d)
	c.mu.Unlock()
}

// fixtureSpec is the stimulus of the committed session.
var fixtureSpec = stimulus.Spec{Type: stimulus.Binary, Width: 16, Height: 16, Seed: 20260501}

const (
	fixtureSeconds = 30.0
	fixtureRig     = "sim1"
	fixturePrefix  = "livefield.sim1"
	fixturePath    = "../testdata/sessions/synth-30s.lfs"
)

var fixtureStart = time.Date(2026, 5, 1, 9, 0, 0, 0, time.UTC)

// recordSynth publishes the synthetic rig for seconds of acquisition time
// through an embedded server and records it into path with the Recorder,
// on a virtual clock: every publisher sleep first waits until the recorder
// has written every message sent so far, then moves the clock, so the
// arrival times are exactly the rig's send schedule. It returns the
// messages as a second subscriber saw them.
func recordSynth(t testing.TB, path string, seconds float64) []session.Record {
	t.Helper()
	nc := startNATS(t)
	clock := &vclock{t: fixtureStart}
	w, err := session.Create(path, session.Header{Rig: fixtureRig, Prefix: fixturePrefix, Created: fixtureStart})
	if err != nil {
		t.Fatal(err)
	}
	rec, err := StartRecorder(nc, fixturePrefix, w, clock.Now)
	if err != nil {
		t.Fatal(err)
	}
	var mu sync.Mutex
	var seen []session.Record
	side, err := nc.Subscribe(fixturePrefix+".>", func(m *nats.Msg) {
		mu.Lock()
		seen = append(seen, session.Record{Subject: m.Subject[len(fixturePrefix)+1:], Data: append([]byte(nil), m.Data...)})
		mu.Unlock()
	})
	if err != nil {
		t.Fatal(err)
	}
	src, err := stimulus.Open(fixtureSpec, "")
	if err != nil {
		t.Fatal(err)
	}
	rig, err := synth.New(synth.Scenario{Seed: 7, LateAt: 15}, src)
	if err != nil {
		t.Fatal(err)
	}
	settle := func() {
		if err := nc.Flush(); err != nil {
			t.Fatal(err)
		}
		sent := int64(nc.Stats().OutMsgs)
		for deadline := time.Now().Add(10 * time.Second); ; {
			mu.Lock()
			n := int64(len(seen))
			mu.Unlock()
			if rec.Stats().Messages >= sent && n >= sent {
				return
			}
			if time.Now().After(deadline) {
				t.Fatalf("recorder has %d of %d messages after 10 s", rec.Stats().Messages, sent)
			}
			time.Sleep(50 * time.Microsecond)
		}
	}
	err = synth.Publish(context.Background(), nc, fixturePrefix, rig, synth.PublishOptions{
		Stimulus: fixtureSpec, Duration: seconds, Speed: 1,
		Now:   clock.Now,
		Sleep: func(d time.Duration) { settle(); clock.add(d) },
	})
	if err != nil {
		t.Fatal(err)
	}
	settle()
	_ = side.Unsubscribe()
	if err := rec.Close(); err != nil {
		t.Fatal(err)
	}
	mu.Lock()
	defer mu.Unlock()
	return seen
}

// readRecords reads every record of a session file.
func readRecords(t testing.TB, path string) []session.Record {
	t.Helper()
	f, err := session.Open(path)
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

// feedAll runs records through a fresh feeder and returns its final snapshot.
func feedAll(t testing.TB, recs []session.Record, opt FeedOptions) *online.Snapshot {
	t.Helper()
	f, err := NewFeeder(opt)
	if err != nil {
		t.Fatal(err)
	}
	for _, r := range recs {
		if err := f.FeedRecord(r); err != nil {
			t.Fatalf("record refused: %v", err)
		}
	}
	return f.Finish()
}

// sameEstimates fails unless every unit's ridge weights and STA agree
// within tol (0: bit for bit).
func sameEstimates(t *testing.T, got, want *online.Snapshot, tol float64) {
	t.Helper()
	if got == nil || want == nil || len(want.Units) == 0 {
		t.Fatalf("no estimates to compare (got %v, want %v)", got != nil, want != nil)
	}
	if len(got.Units) != len(want.Units) || got.Bins != want.Bins {
		t.Fatalf("%d units over %d bins, want %d over %d", len(got.Units), got.Bins, len(want.Units), want.Bins)
	}
	for _, u := range want.Units {
		wd, _ := want.Detail(u.ID)
		gd, ok := got.Detail(u.ID)
		if !ok || wd == nil || len(wd.Ridge) == 0 || len(gd.Ridge) != len(wd.Ridge) || len(gd.STA) != len(wd.STA) {
			t.Fatalf("unit %s: estimates missing or of another size", u.ID)
		}
		for i := range wd.Ridge {
			if d := math.Abs(float64(gd.Ridge[i] - wd.Ridge[i])); d > tol || math.IsNaN(d) {
				t.Fatalf("unit %s ridge[%d] = %v, want %v", u.ID, i, gd.Ridge[i], wd.Ridge[i])
			}
		}
		for i := range wd.STA {
			if d := math.Abs(float64(gd.STA[i] - wd.STA[i])); d > tol || math.IsNaN(d) {
				t.Fatalf("unit %s sta[%d] = %v, want %v", u.ID, i, gd.STA[i], wd.STA[i])
			}
		}
	}
}

func copyFile(t testing.TB, from, to string) {
	t.Helper()
	b, err := os.ReadFile(from)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(to, b, 0o644); err != nil {
		t.Fatal(err)
	}
}

func tempPath(t testing.TB, name string) string { return filepath.Join(t.TempDir(), name) }
