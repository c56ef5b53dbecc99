package shards

import (
	"context"
	"fmt"
	"math"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"livefield/online"
	"livefield/replay/session"
	"livefield/stream/ingest"
	"livefield/stream/wire"
)

// natsServerBinary finds Debian's nats-server (package nats-server). Without
// it the test skips, or fails when LIVEFIELD_REQUIRE_NATS_SERVER=1 (as in CI).
func natsServerBinary(t *testing.T) string {
	t.Helper()
	for _, p := range []string{"/usr/sbin/nats-server", "/usr/bin/nats-server"} {
		if _, err := os.Stat(p); err == nil {
			return p
		}
	}
	if p, err := exec.LookPath("nats-server"); err == nil {
		return p
	}
	if os.Getenv("LIVEFIELD_REQUIRE_NATS_SERVER") == "1" {
		t.Fatal("LIVEFIELD_REQUIRE_NATS_SERVER=1 but no nats-server binary: install Debian's package nats-server")
	}
	t.Skip("nats-server binary not found (install Debian's package nats-server); skipping the cluster test")
	return ""
}

// freePort returns a loopback port that was free a moment ago.
func freePort(t *testing.T) int {
	t.Helper()
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer ln.Close()
	return ln.Addr().(*net.TCPAddr).Port
}

// clusterNode is one nats-server process of a three-server cluster.
type clusterNode struct {
	name, conf string
	client     int
	cmd        *exec.Cmd
	log        *os.File
}

func (n *clusterNode) url() string { return fmt.Sprintf("nats://127.0.0.1:%d", n.client) }

func (n *clusterNode) start(t *testing.T, bin string) {
	t.Helper()
	n.cmd = exec.Command(bin, "-c", n.conf)
	n.cmd.Stdout, n.cmd.Stderr = n.log, n.log
	if err := n.cmd.Start(); err != nil {
		t.Fatal(err)
	}
}

// kill ends the process by its pid (SIGKILL: no goodbye to the cluster).
func (n *clusterNode) kill() {
	if n.cmd != nil && n.cmd.Process != nil {
		_ = n.cmd.Process.Kill()
		_ = n.cmd.Wait()
		n.cmd = nil
	}
}

// startCluster starts three nats-server processes with JetStream, joined by
// cluster routes on loopback; the lab recipe in the README uses the same
// configuration.
func startCluster(t *testing.T) []*clusterNode {
	t.Helper()
	bin := natsServerBinary(t)
	dir := t.TempDir()
	nodes := make([]*clusterNode, 3)
	routes := make([]string, 3)
	cports := make([]int, 3)
	for i := range nodes {
		cports[i] = freePort(t)
		routes[i] = fmt.Sprintf("nats://127.0.0.1:%d", cports[i])
	}
	for i := range nodes {
		n := &clusterNode{name: fmt.Sprintf("lf%d", i+1), client: freePort(t)}
		n.conf = filepath.Join(dir, n.name+".conf")
		conf := fmt.Sprintf(`server_name: %s
listen: 127.0.0.1:%d
jetstream { store_dir: %q }
cluster {
  name: livefield
  listen: 127.0.0.1:%d
  routes: [%s]
}
`, n.name, n.client, filepath.Join(dir, n.name), cports[i], strings.Join(routes, ", "))
		if err := os.WriteFile(n.conf, []byte(conf), 0o644); err != nil {
			t.Fatal(err)
		}
		f, err := os.Create(filepath.Join(dir, n.name+".log"))
		if err != nil {
			t.Fatal(err)
		}
		n.log = f
		n.start(t, bin)
		nodes[i] = n
	}
	t.Cleanup(func() {
		for _, n := range nodes {
			n.kill()
			n.log.Close()
		}
		if t.Failed() {
			for _, n := range nodes {
				b, _ := os.ReadFile(n.log.Name())
				if len(b) > 4000 {
					b = b[len(b)-4000:]
				}
				t.Logf("%s log (end):\n%s", n.name, b)
			}
		}
	})
	return nodes
}

// connectTo connects to the cluster through the given servers, in that
// order (no shuffling, so the test knows which server a client is on).
func connectTo(t *testing.T, nodes ...*clusterNode) *nats.Conn {
	t.Helper()
	urls := make([]string, len(nodes))
	for i, n := range nodes {
		urls[i] = n.url()
	}
	var nc *nats.Conn
	eventually(t, 20*time.Second, "connecting to "+urls[0], func() bool {
		var err error
		nc, err = nats.Connect(strings.Join(urls, ","), nats.DontRandomize(), nats.MaxReconnects(-1),
			nats.ReconnectWait(50*time.Millisecond), nats.RetryOnFailedConnect(false))
		return err == nil
	})
	t.Cleanup(nc.Close)
	return nc
}

// TestCluster runs a rig on a real three-server NATS cluster: the rig's
// stream with three replicas, two durable shard workers and the merged
// view. One server (the one shard 0/2 is connected to) is killed mid-block
// and restarted later while the rig keeps publishing with JetStream
// acknowledgements; meanwhile the worker of shard 1/2 dies and a new one
// takes its place (the merged view shows the shard missing in between). Every spike must be counted exactly once and the
// estimates must equal a single worker's fed the same messages directly.
func TestCluster(t *testing.T) {
	nodes := startCluster(t)
	admin := connectTo(t, nodes[2], nodes[1], nodes[0])
	js, err := jetstream.New(admin)
	if err != nil {
		t.Fatal(err)
	}
	const rig = "c1"
	prefix := "livefield." + rig
	cfg := ingest.StreamConfig(ingest.StreamName(prefix), prefix)
	cfg.Replicas = 3
	cfg.MaxBytes = 64 << 20 // the test's servers have small stores
	eventually(t, 30*time.Second, "the cluster elects a JetStream leader and takes the stream", func() bool {
		ctx, cancel := context.WithTimeout(context.Background(), 2*time.Second)
		defer cancel()
		_, err := js.CreateOrUpdateStream(ctx, cfg)
		return err == nil
	})

	recs := records(t)
	total, perUnit := countSpikes(t, recs)
	// Durable workers, one on the server that will die, one on another.
	opt := ingest.Options{Durable: true}
	w0 := startWorker(t, connectTo(t, nodes[0], nodes[1], nodes[2]), rig, ingest.Shard{Index: 0, Count: 2}, opt)
	w1 := startWorker(t, connectTo(t, nodes[1], nodes[2], nodes[0]), rig, ingest.Shard{Index: 1, Count: 2}, opt)
	st, err := js.Stream(context.Background(), cfg.Name)
	if err != nil {
		t.Fatal(err)
	}
	if r := st.CachedInfo().Config.Replicas; r != 3 {
		t.Fatalf("the workers changed the stream to %d replicas", r)
	}

	v := NewView(connectTo(t, nodes[1], nodes[2]), prefix, ViewOptions{Poll: 200 * time.Millisecond, Timeout: 10 * time.Second})
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	go v.Run(ctx)

	// The rig publishes at three times real time, each message acknowledged
	// by the stream (retried with the same Nats-Msg-Id until it is, so a
	// retry is stored once); server lf1 dies a third of the way in and
	// comes back at two thirds.
	pub := connectTo(t, nodes[2], nodes[1], nodes[0])
	pjs, err := jetstream.New(pub)
	if err != nil {
		t.Fatal(err)
	}
	const speed = 3.0
	t0, a0 := time.Now(), recs[0].At
	killAt, restartAt := len(recs)/3, 2*len(recs)/3
	workerDownAt, workerUpAt := len(recs)/2, 3*len(recs)/5
	var retries int
	var killedFor, seenMissing time.Duration
	var killedAt, workerDown time.Time
	for i, r := range recs {
		if !workerDown.IsZero() && seenMissing == 0 && slices.Contains(v.Counters().Missing, "1/2") {
			seenMissing = time.Since(workerDown)
		}
		if d := time.Duration(float64(r.At.Sub(a0))/speed) - time.Since(t0); d > 0 {
			time.Sleep(d)
		}
		switch i {
		case killAt:
			nodes[0].kill()
			killedAt = time.Now()
			t.Logf("killed %s (pid gone) at message %d of %d", nodes[0].name, i, len(recs))
		case workerDownAt:
			// Shard 1/2's worker dies; the rig goes on.
			_ = w1.svc.Stop()
			_ = w1.rig.Close()
			workerDown = time.Now()
			t.Logf("stopped the worker of shard 1/2 at message %d", i)
		case workerUpAt:
			w1 = restartWorker(t, connectTo(t, nodes[1], nodes[2], nodes[0]), rig, ingest.Shard{Index: 1, Count: 2}, opt)
			t.Logf("started shard 1/2 again at message %d; the view had seen it missing after %v", i, seenMissing.Round(time.Millisecond))
		case restartAt:
			nodes[0].start(t, natsServerBinary(t))
			killedFor = time.Since(killedAt)
			t.Logf("restarted %s at message %d after %v", nodes[0].name, i, killedFor.Round(time.Millisecond))
		}
		retries += publishAcked(t, pjs, prefix+"."+r.Subject, r.Data, fmt.Sprintf("%s-%d", rig, i))
	}
	t.Logf("published %d messages, %d spikes, in %v with %d retried publishes", len(recs), total, time.Since(t0).Round(time.Millisecond), retries)

	info, err := st.Info(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	if info.State.Msgs != uint64(len(recs)) {
		t.Fatalf("the stream holds %d messages, the rig sent %d", info.State.Msgs, len(recs))
	}
	// Both workers process every message of the block, each once.
	n := uint64(len(recs))
	s0, s1 := settleWithin(t, w0.rig, n, 30*time.Second), settleWithin(t, w1.rig, n, 30*time.Second)
	h0, h1 := w0.rig.Health(), w1.rig.Health()
	for _, h := range []ingest.Health{h0, h1} {
		if h.SpikesTotal+h.OtherShardSpikes != total {
			t.Errorf("shard %s: %d own + %d other spikes, the rig sent %d", h.Shard, h.SpikesTotal, h.OtherShardSpikes, total)
		}
		t.Logf("shard %s: %d reconnects, %d redeliveries skipped, %d consumer recreations, %d consumer errors",
			h.Shard, h.Reconnects, h.Duplicates, h.Resyncs, h.JSErrors)
	}
	if h0.SpikesTotal+h1.SpikesTotal != total {
		t.Errorf("shards counted %d + %d spikes, the rig sent %d", h0.SpikesTotal, h1.SpikesTotal, total)
	}

	// A single worker fed the same messages directly.
	ref := single(t, prefix, recs)
	v.Refresh(ctx)
	eventually(t, 60*time.Second, "the merged view has every unit's estimate", func() bool {
		v.Fetch(ctx, nil, true)
		s := v.Snapshot()
		for _, u := range ref.Units {
			if _, ok := s.Detail(u.ID); !ok {
				return false
			}
		}
		return true
	})
	m := v.Snapshot()
	if seenMissing == 0 {
		t.Error("the merged view never showed shard 1/2 missing while its worker was down")
	}
	if h := v.Counters(); len(h.Missing) != 0 {
		t.Errorf("shards missing at the end: %v (%s)", h.Missing, h.Warning)
	}
	if m == nil || len(m.Units) != len(ref.Units) || len(s0.Units)+len(s1.Units) != len(ref.Units) {
		t.Fatalf("merged view has %v units, the single worker %d", m, len(ref.Units))
	}
	var counted int64
	worst := 0.0
	for _, u := range ref.Units {
		d, ok := m.Detail(u.ID)
		rd, _ := ref.Detail(u.ID)
		if !ok {
			t.Errorf("unit %s missing from the merged view", u.ID)
			continue
		}
		if d.Spikes != rd.Spikes {
			t.Errorf("unit %s: %d spikes in the merged view, %d in the single worker", u.ID, d.Spikes, rd.Spikes)
		}
		counted += d.Spikes
		for _, pair := range [][2]online.Floats{{d.Ridge, rd.Ridge}, {d.STA, rd.STA}} {
			if len(pair[0]) != len(pair[1]) {
				t.Fatalf("unit %s: estimate lengths %d and %d", u.ID, len(pair[0]), len(pair[1]))
			}
			scale := 0.0
			for _, x := range pair[1] {
				scale = math.Max(scale, math.Abs(float64(x)))
			}
			for i := range pair[0] {
				e := math.Abs(float64(pair[0][i]-pair[1][i])) / scale
				worst = math.Max(worst, e)
			}
		}
		if perUnit[u.ID] < d.Spikes {
			t.Errorf("unit %s: %d spikes counted, %d sent", u.ID, d.Spikes, perUnit[u.ID])
		}
	}
	// The grouping of bins into updates follows timing, so the two routes
	// round differently: a relative tolerance of 1e-9 of the largest value.
	if worst > 1e-9 {
		t.Errorf("ridge and STA differ from the single worker's by up to %.2g of their largest value", worst)
	}
	// Significance is tested at looks (online.LookSpikes) evaluated at the
	// first update after a unit's count passes each look, so which unit is
	// significant may follow the update times of a worker that caught up
	// after a restart; the data and the exact estimates above may not.
	if m.Summary.Units != ref.Summary.Units {
		t.Errorf("merged summary %+v, single worker %+v", m.Summary, ref.Summary)
	}
	t.Logf("merged summary: %d significant, %d reliable; single worker: %d, %d",
		m.Summary.Significant, m.Summary.Reliable, ref.Summary.Significant, ref.Summary.Reliable)
	t.Logf("%d units, %d spikes in bins (of %d sent), estimates within %.2g relative of the single worker's; %s was down %v",
		len(m.Units), counted, total, worst, nodes[0].name, killedFor.Round(time.Millisecond))
}

// restartWorker starts a worker the way a supervisor restarts `serve`:
// again after a failure. While the cluster settles after losing a server,
// the stream update at a worker's start can time out (seen with
// nats-server 2.9: the first update after the kill took over 5 s, the next
// ones 10–20 ms).
func restartWorker(t *testing.T, nc *nats.Conn, rigName string, sh ingest.Shard, opt ingest.Options) *worker {
	t.Helper()
	opt.Prefix = "livefield." + rigName
	opt.Shard = sh
	deadline := time.Now().Add(30 * time.Second)
	for tries := 1; ; tries++ {
		r, err := ingest.Start(context.Background(), nc, opt)
		if err == nil {
			t.Cleanup(func() { _ = r.Close() })
			svc, err := Announce(nc, r, Info{Rig: rigName, Prefix: opt.Prefix, Shard: sh})
			if err != nil {
				t.Fatal(err)
			}
			t.Cleanup(func() { _ = svc.Stop() })
			if tries > 1 {
				t.Logf("shard %s started at try %d", sh, tries)
			}
			return &worker{rig: r, svc: svc}
		}
		if time.Now().After(deadline) {
			t.Fatalf("shard %s does not start: %v", sh, err)
		}
		t.Logf("shard %s: %v; starting again", sh, err)
	}
}

// publishAcked publishes one message until the stream acknowledges it, and
// returns the retries it took.
func publishAcked(t *testing.T, js jetstream.JetStream, subj string, data []byte, id string) int {
	t.Helper()
	deadline := time.Now().Add(30 * time.Second)
	for retries := 0; ; retries++ {
		ctx, cancel := context.WithTimeout(context.Background(), 2*time.Second)
		_, err := js.Publish(ctx, subj, data, jetstream.WithMsgID(id))
		cancel()
		if err == nil {
			return retries
		}
		if time.Now().After(deadline) {
			t.Fatalf("publishing %s: no acknowledgement for 30 s: %v", id, err)
		}
		time.Sleep(100 * time.Millisecond)
	}
}

func settleWithin(t *testing.T, r *ingest.Rig, n uint64, within time.Duration) *online.Snapshot {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), within)
	defer cancel()
	if !r.WaitProcessed(ctx, n) {
		h := r.Health()
		t.Fatalf("shard %s processed %d of %d messages (durable %v): messages were lost", h.Shard, h.Processed, n, h.Durable)
	}
	return r.Sync()
}

// countSpikes counts the spikes the rig sends, in all and per unit.
func countSpikes(t *testing.T, recs []session.Record) (uint64, map[string]int64) {
	t.Helper()
	per := map[string]int64{}
	var total uint64
	for _, r := range recs {
		if r.Subject != "spikes" {
			continue
		}
		s, err := wire.DecodeSpikes(r.Data)
		if err != nil {
			t.Fatal(err)
		}
		total += uint64(len(s.Unit))
		for _, u := range s.Unit {
			per[u]++
		}
	}
	return total, per
}

// single feeds the records to one unsharded ingest loop, without NATS.
func single(t *testing.T, prefix string, recs []session.Record) *online.Snapshot {
	t.Helper()
	loop, err := ingest.NewLoop(ingest.Options{Prefix: prefix})
	if err != nil {
		t.Fatal(err)
	}
	defer loop.Close()
	for _, r := range recs {
		_ = loop.Feed(r.Subject, r.Data, r.At) // refusals are counted, as in the workers
	}
	return loop.Finish(recs[len(recs)-1].At)
}
