package shards

import (
	"context"
	"encoding/json"
	"math"
	"slices"
	"strings"
	"testing"
	"time"

	"livefield/online"
	"livefield/stream/ingest"
	"livefield/stream/natstest"
)

// TestViewMergesShards runs shards 0/2 and 1/2 of one rig beside an
// unsharded worker on one server, and checks the merged view against the
// unsharded worker: every unit once, with its shard's estimates; the block
// summary and READY over all units; details; controls routed to the shard
// that owns the unit; and a shard that disappears shown as missing, its
// units kept, READY withheld.
func TestViewMergesShards(t *testing.T) {
	srv := natstest.Start(t, natstest.Options{})
	nc := srv.Connect(t)
	recs := running(t, records(t))
	const rig = "m1"
	w0 := startWorker(t, srv.Connect(t), rig, ingest.Shard{Index: 0, Count: 2}, ingest.Options{})
	w1 := startWorker(t, srv.Connect(t), rig, ingest.Shard{Index: 1, Count: 2}, ingest.Options{})
	whole, err := ingest.Start(context.Background(), srv.Connect(t), ingest.Options{Prefix: "livefield." + rig})
	if err != nil {
		t.Fatal(err)
	}
	defer whole.Close()
	publishCore(t, nc, "livefield."+rig, recs)
	n := uint64(len(recs))
	s0, s1, ref := settle(t, w0.rig, n), settle(t, w1.rig, n), settle(t, whole, n)

	// Under the race detector on two busy cores the shards may answer the
	// discovery round late: refresh until both are in (a minute at most).
	v := NewView(srv.Connect(t), "livefield."+rig, ViewOptions{Timeout: time.Minute, DiscoverWait: time.Second})
	ctx := context.Background()
	var m *online.Snapshot
	for deadline := time.Now().Add(time.Minute); ; {
		v.Refresh(ctx)
		if m = v.Snapshot(); m != nil && len(m.Units) == len(ref.Units) {
			break
		}
		if time.Now().After(deadline) {
			t.Fatal("no merged snapshot of both shards within a minute")
		}
	}
	// Every unit exactly once, from its own shard, equal to the unsharded
	// worker's within 1e-12 (TestShards in stream/ingest: the shards' ridge
	// state is the same recursion).
	if len(m.Units) != len(ref.Units) || len(s0.Units)+len(s1.Units) != len(ref.Units) || len(s0.Units) == 0 || len(s1.Units) == 0 {
		t.Fatalf("merged %d units, shards %d + %d, unsharded %d", len(m.Units), len(s0.Units), len(s1.Units), len(ref.Units))
	}
	byID := map[string]online.UnitSummary{}
	for _, u := range ref.Units {
		byID[u.ID] = u
	}
	seen := map[string]bool{}
	for _, u := range m.Units {
		if seen[u.ID] {
			t.Errorf("unit %s twice", u.ID)
		}
		seen[u.ID] = true
		r, ok := byID[u.ID]
		if !ok {
			t.Errorf("unit %s not in the unsharded worker's", u.ID)
			continue
		}
		// Before a unit is significant its reliability window sits on the
		// median peak lag of the mapper's population, which differs between
		// a shard and the whole rig; from significance on it is the unit's own.
		significant := r.Status == online.Emerging || r.Status == online.Reliable
		if u.Spikes != r.Spikes || u.Status != r.Status || (significant && !near(float64(u.Reliability), float64(r.Reliability), 1e-9)) ||
			!near(float64(u.Significance), float64(r.Significance), 1e-9) {
			t.Errorf("unit %s: merged %d spikes %s R=%v, unsharded %d %s R=%v", u.ID, u.Spikes, u.Status, u.Reliability, r.Spikes, r.Status, r.Reliability)
		}
	}
	// The block summary over all units equals the unsharded worker's.
	got, want := m.Summary, ref.Summary
	if got.Units != want.Units || got.Significant != want.Significant || got.Reliable != want.Reliable || got.Ready != want.Ready ||
		!near(float64(got.ETA), float64(want.ETA), 1e-9) || !near(float64(got.Aperture), float64(want.Aperture), 1e-9) ||
		!near(float64(got.ApertureDeg), float64(want.ApertureDeg), 1e-9) || !near(float64(got.CentreX), float64(want.CentreX), 1e-9) {
		t.Errorf("merged summary %+v\nunsharded %+v", got, want)
	}
	if m.Block != ref.Block || m.Bins != ref.Bins {
		t.Errorf("merged block %s bins %d, unsharded %s %d", m.Block, m.Bins, ref.Block, ref.Bins)
	}
	t.Logf("%d units (%d + %d), %d significant, %d reliable, ready %v", len(m.Units), len(s0.Units), len(s1.Units), got.Significant, got.Reliable, got.Ready)

	// A unit's full estimate, fetched from its shard on request.
	id := s1.Units[0].ID
	v.Fetch(ctx, []string{id}, false)
	d, ok := v.Snapshot().Detail(id)
	rd, _ := ref.Detail(id)
	if !ok || len(d.Ridge) != len(rd.Ridge) || len(d.Ridge) == 0 {
		t.Fatalf("detail of %s: %v", id, ok)
	}
	for i := range d.Ridge {
		if !near(float64(d.Ridge[i]), float64(rd.Ridge[i]), 1e-9) {
			t.Fatalf("ridge[%d] of %s: merged %v, unsharded %v", i, id, d.Ridge[i], rd.Ridge[i])
		}
	}

	// Controls: STC goes to the unit's own shard only; the criterion to all.
	if err := v.FlagSTC(id, true); err != nil {
		t.Fatal(err)
	}
	if d, ok := w1.rig.Sync().Detail(id); !ok || !d.Flagged {
		t.Errorf("shard 1/2 did not get the STC request for %s", id)
	}
	if _, ok := w0.rig.Sync().Detail(id); ok {
		t.Errorf("shard 0/2 took unit %s", id)
	}
	if err := v.SetCriterion(0.8, 0.5); err != nil {
		t.Fatal(err)
	}
	for _, w := range []*worker{w0, w1} {
		if s := w.rig.Sync().Summary; s.Target != 0.8 || s.Fraction != 0.5 {
			t.Errorf("%s criterion %v %v", w.rig.Health().Shard, s.Target, s.Fraction)
		}
	}

	// Shard 1/2 disappears: shown as missing, its units kept, no READY.
	before := len(v.Snapshot().Units)
	if err := w1.svc.Stop(); err != nil {
		t.Fatal(err)
	}
	start := time.Now()
	v.Refresh(ctx)
	h := v.Counters()
	t.Logf("shard seen missing after one round, %v", time.Since(start).Round(time.Millisecond))
	if !slices.Equal(h.Missing, []string{"1/2"}) || !strings.Contains(h.Warning, "shard 1/2 missing") || h.Shards[1].State != "missing" {
		t.Errorf("health after stopping shard 1/2: missing %v, warning %q", h.Missing, h.Warning)
	}
	if s := v.Snapshot(); len(s.Units) != before || s.Summary.Ready {
		t.Errorf("with a shard missing: %d units (want %d), ready %v", len(s.Units), before, s.Summary.Ready)
	}
	if err := v.FlagSTC(id, false); err == nil || !strings.Contains(err.Error(), "shard 1/2") {
		t.Errorf("STC to a missing shard: %v", err)
	}
	b, _ := json.Marshal(v.Health())
	if !strings.Contains(string(b), `"state":"missing"`) {
		t.Errorf("health JSON %s", b)
	}
	// It comes back.
	w1.svc, err = Announce(srv.Connect(t), w1.rig, Info{Rig: rig, Prefix: "livefield." + rig, Shard: ingest.Shard{Index: 1, Count: 2}})
	if err != nil {
		t.Fatal(err)
	}
	defer w1.svc.Stop()
	v.Refresh(ctx)
	if h := v.Counters(); len(h.Missing) != 0 || h.Warning != "" {
		t.Errorf("after the shard came back: missing %v, warning %q", h.Missing, h.Warning)
	}
}

// TestViewWithoutShards: a rig nobody serves yet says so instead of
// showing an empty block.
func TestViewWithoutShards(t *testing.T) {
	srv := natstest.Start(t, natstest.Options{})
	v := NewView(srv.Connect(t), "livefield.none", ViewOptions{DiscoverWait: 50 * time.Millisecond})
	v.Refresh(context.Background())
	if v.Snapshot() != nil {
		t.Error("a snapshot without shards")
	}
	if h := v.Counters(); !strings.Contains(h.Warning, "no worker") {
		t.Errorf("warning %q", h.Warning)
	}
}

// fakeWorker serves a fixed snapshot.
type fakeWorker struct{ snap *online.Snapshot }

func (f fakeWorker) Snapshot() *online.Snapshot          { return f.snap }
func (f fakeWorker) Health() ingest.Health               { return ingest.Health{Durable: true} }
func (f fakeWorker) Reset()                              {}
func (f fakeWorker) FlagSTC(string, bool) error          { return nil }
func (f fakeWorker) SetCriterion(float64, float64) error { return nil }

// TestLargeRepliesInParts: a snapshot and a detail beyond PartSize (and
// beyond the server's 1 MiB max_payload) arrive whole, in parts.
func TestLargeRepliesInParts(t *testing.T) {
	srv := natstest.Start(t, natstest.Options{})
	nc := srv.Connect(t)
	head := online.Snapshot{Block: "B", Shape: [3]int{12, 64, 64}}
	var details []*online.UnitDetail
	for u := range 40 {
		m := make(online.Floats, 64*64)
		for i := range m {
			m[i] = online.Float(math.Sin(float64(u*4096+i)) / 3)
		}
		us := online.UnitSummary{ID: "u" + string(rune('a'+u%26)) + string(rune('a'+u/26)), Map: m, Status: online.Collecting}
		head.Units = append(head.Units, us)
		details = append(details, &online.UnitDetail{UnitSummary: us, Ridge: slices.Repeat(m, 12)})
	}
	snap := online.AssembleSnapshot(head, details)
	svc, err := Announce(nc, fakeWorker{snap}, Info{Rig: "big", Prefix: "livefield.big", Shard: ingest.Shard{}})
	if err != nil {
		t.Fatal(err)
	}
	defer svc.Stop()
	want, _ := json.Marshal(snap)
	subj := ShardSubject("livefield.big", ingest.Shard{})
	got, ref, _, err := fetch(context.Background(), nc, subj+".snapshot", partRequest{}, 20*time.Second)
	if err != nil || string(got) != string(want) {
		t.Fatalf("snapshot of %d bytes: got %d bytes, %v", len(want), len(got), err)
	}
	if len(want) <= 2*PartSize {
		t.Fatalf("the test snapshot is only %d bytes", len(want))
	}
	// Unchanged: no body.
	if _, _, unchanged, err := fetch(context.Background(), nc, subj+".snapshot", partRequest{Known: ref}, 20*time.Second); err != nil || !unchanged {
		t.Errorf("asking with the latest ref: unchanged %v, %v", unchanged, err)
	}
	wantD, _ := json.Marshal(details[3])
	gotD, _, _, err := fetch(context.Background(), nc, subj+".unit", partRequest{ID: details[3].ID}, 20*time.Second)
	if err != nil || string(gotD) != string(wantD) {
		t.Fatalf("detail of %d bytes: got %d, %v", len(wantD), len(gotD), err)
	}
	if _, _, _, err := fetch(context.Background(), nc, subj+".unit", partRequest{ID: "nobody"}, 20*time.Second); err == nil || !strings.Contains(err.Error(), "404") {
		t.Errorf("unknown unit: %v", err)
	}
}

func near(a, b, rel float64) bool {
	if math.IsNaN(a) || math.IsNaN(b) {
		return math.IsNaN(a) && math.IsNaN(b)
	}
	return math.Abs(a-b) <= rel*math.Max(1, math.Max(math.Abs(a), math.Abs(b)))
}
