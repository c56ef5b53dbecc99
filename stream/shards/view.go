package shards

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"sort"
	"strings"
	"sync"
	"time"

	"github.com/nats-io/nats.go"

	"livefield/online"
	"livefield/stream/ingest"
)

// Defaults of ViewOptions.
const (
	DefaultPoll         = time.Second
	DefaultTimeout      = 2 * time.Second
	DefaultDiscoverWait = 200 * time.Millisecond
	// detailKeep is how long a unit's detail stays fetched after it was
	// last wanted.
	detailKeep = 30 * time.Second
)

// ViewOptions configure a View.
type ViewOptions struct {
	Poll         time.Duration // between two rounds (DefaultPoll)
	Timeout      time.Duration // of one request to a shard (DefaultTimeout)
	DiscoverWait time.Duration // how long a round collects announcements (DefaultDiscoverWait)
	Logger       *slog.Logger  // slog.Default when nil
}

func (o *ViewOptions) fill() {
	if o.Poll <= 0 {
		o.Poll = DefaultPoll
	}
	if o.Timeout <= 0 {
		o.Timeout = DefaultTimeout
	}
	if o.DiscoverWait <= 0 {
		o.DiscoverWait = DefaultDiscoverWait
	}
	if o.Logger == nil {
		o.Logger = slog.Default()
	}
}

// View is the merged picture of one rig's shards: a
// display.SnapshotSource. Run keeps it current; its methods may be called
// from any goroutine.
type View struct {
	nc     *nats.Conn
	prefix string
	opt    ViewOptions

	mu       sync.Mutex
	rig      string
	count    int // shards of the rig (0 until one announced itself)
	shards   []*shardState
	details  map[string]*detailEntry
	wanted   []string // units in view on the page
	crit     *online.Criterion
	snap     *online.Snapshot
	snapKey  string // what snap was built from
	rounds   uint64
	lastDisc []Instance
}

type shardState struct {
	shard      ingest.Shard
	instance   string
	http       string
	snap       *online.Snapshot
	ref        string
	health     json.RawMessage
	everSeen   bool
	lastSeen   time.Time
	missingAt  time.Time // when it stopped answering; zero while present
	err        string
	block      string
	blockSince time.Time
}

type detailEntry struct {
	d        *online.UnitDetail
	ref      string // the shard snapshot it was fetched under
	wantedAt time.Time
}

// NewView returns the view of the rig with the subject prefix (e.g.
// "livefield.rig1"); Run or Refresh fill it.
func NewView(nc *nats.Conn, prefix string, opt ViewOptions) *View {
	opt.fill()
	return &View{nc: nc, prefix: prefix, opt: opt, details: map[string]*detailEntry{},
		rig: strings.TrimPrefix(prefix, "livefield.")}
}

// Prefix is the rig's subject prefix.
func (v *View) Prefix() string { return v.prefix }

// Run refreshes the view every Poll until ctx is done.
func (v *View) Run(ctx context.Context) {
	t := time.NewTicker(v.opt.Poll)
	defer t.Stop()
	for {
		v.Refresh(ctx)
		select {
		case <-ctx.Done():
			return
		case <-t.C:
		}
	}
}

// Want sets the units whose full estimates the view keeps current (the
// units open on the page); see display.Hub.InView.
func (v *View) Want(ids []string) {
	v.mu.Lock()
	v.wanted = append(v.wanted[:0:0], ids...)
	v.mu.Unlock()
}

// Refresh runs one round: it looks for the rig's workers, asks each shard
// for its latest snapshot and health and the wanted units' details, and
// publishes the merged snapshot.
func (v *View) Refresh(ctx context.Context) {
	if inst, err := Discover(ctx, v.nc, v.opt.DiscoverWait); err == nil {
		v.noteInstances(inst)
	}
	v.mu.Lock()
	shards := append([]*shardState(nil), v.shards...)
	known := make([]string, len(shards))
	for i, s := range shards {
		known[i] = s.ref
	}
	v.mu.Unlock()

	type answer struct {
		snap      *online.Snapshot
		ref       string
		unchanged bool
		health    json.RawMessage
		err       error
	}
	answers := make([]answer, len(shards))
	var wg sync.WaitGroup
	for i, s := range shards {
		wg.Add(1)
		go func() {
			defer wg.Done()
			a := &answers[i]
			subj := ShardSubject(v.prefix, s.shard)
			body, ref, unchanged, err := fetch(ctx, v.nc, subj+".snapshot", partRequest{Known: known[i]}, v.opt.Timeout)
			if err != nil {
				a.err = err
				return
			}
			a.ref, a.unchanged = ref, unchanged
			if !unchanged {
				var snap *online.Snapshot
				if err := json.Unmarshal(body, &snap); err != nil {
					a.err = fmt.Errorf("shards: snapshot of %s: %w", s.shard, err)
					return
				}
				a.snap = snap
			}
			if m, err := request(ctx, v.nc, subj+".health", nil, v.opt.Timeout); err == nil {
				a.health = append(json.RawMessage(nil), m.Data...)
			}
		}()
	}
	wg.Wait()

	now := time.Now()
	v.mu.Lock()
	for i, s := range shards {
		a := answers[i]
		if a.err != nil {
			if s.missingAt.IsZero() {
				s.missingAt = now
				v.opt.Logger.Warn("livefield: shard missing", "rig", v.rig, "shard", s.shard.String(), "err", a.err)
			}
			s.err = a.err.Error()
			continue
		}
		if !s.missingAt.IsZero() && s.everSeen {
			v.opt.Logger.Info("livefield: shard back", "rig", v.rig, "shard", s.shard.String(), "after", now.Sub(s.missingAt).Round(time.Millisecond))
		}
		s.everSeen, s.lastSeen, s.missingAt, s.err = true, now, time.Time{}, ""
		if !a.unchanged {
			s.snap, s.ref = a.snap, a.ref
			if b := blockOf(a.snap); b != s.block {
				s.block, s.blockSince = b, now
			}
		}
		if a.health != nil {
			s.health = a.health
		}
	}
	v.rounds++
	v.mu.Unlock()

	v.resendCriterion(ctx)
	v.fetchDetails(ctx, nil, false)
	v.publish()
}

func blockOf(s *online.Snapshot) string {
	if s == nil {
		return ""
	}
	return s.Block
}

// noteInstances takes the rig's announced workers: the shard count and the
// instance of each shard.
func (v *View) noteInstances(all []Instance) {
	v.mu.Lock()
	defer v.mu.Unlock()
	v.lastDisc = all
	count := 0
	for _, in := range all {
		if in.Prefix == v.prefix {
			count = max(count, in.Shard.Count, 1)
			if in.Rig != "" {
				v.rig = in.Rig
			}
		}
	}
	if count == 0 {
		return // nobody announced now: keep what is known (missing shards show as such)
	}
	if count != v.count {
		if v.count != 0 {
			v.opt.Logger.Warn("livefield: the rig's shard count changed", "rig", v.rig, "from", v.count, "to", count)
		}
		v.count = count
		v.shards = make([]*shardState, count)
		for i := range v.shards {
			v.shards[i] = &shardState{shard: ingest.Shard{Index: i, Count: count}}
		}
		clear(v.details)
	}
	for _, in := range all {
		if in.Prefix == v.prefix && max(in.Shard.Count, 1) == count {
			s := v.shards[in.Shard.Index]
			s.instance, s.http = in.ID, in.HTTP
		}
	}
}

// fetchDetails brings the details of the wanted units (and of ids, or of
// every unit with all) up to date with their shards' snapshots.
func (v *View) fetchDetails(ctx context.Context, ids []string, all bool) {
	now := time.Now()
	v.mu.Lock()
	for _, id := range append(append([]string(nil), v.wanted...), ids...) {
		e := v.details[id]
		if e == nil {
			e = &detailEntry{}
			v.details[id] = e
		}
		e.wantedAt = now
	}
	if all {
		for _, s := range v.shards {
			if s.snap != nil {
				for _, u := range s.snap.Units {
					if v.details[u.ID] == nil {
						// Wanted for this export only: kept (and refreshed)
						// for two rounds rather than detailKeep.
						v.details[u.ID] = &detailEntry{wantedAt: now.Add(2*v.opt.Poll - detailKeep)}
					}
				}
			}
		}
	}
	type job struct {
		id, subj, ref string
	}
	var jobs []job
	for id, e := range v.details {
		if now.Sub(e.wantedAt) > detailKeep {
			delete(v.details, id)
			continue
		}
		if v.count == 0 {
			continue
		}
		s := v.shards[ingest.ShardOf(id, v.count)]
		if s.missingAt.IsZero() && s.snap != nil && e.ref != s.ref {
			jobs = append(jobs, job{id: id, subj: ShardSubject(v.prefix, s.shard) + ".unit", ref: s.ref})
		}
	}
	v.mu.Unlock()

	got := make([]*online.UnitDetail, len(jobs))
	sem := make(chan struct{}, 4)
	var wg sync.WaitGroup
	for i, j := range jobs {
		wg.Add(1)
		sem <- struct{}{}
		go func() {
			defer func() { <-sem; wg.Done() }()
			body, _, _, err := fetch(ctx, v.nc, j.subj, partRequest{ID: j.id}, v.opt.Timeout)
			if err != nil {
				return
			}
			var d online.UnitDetail
			if json.Unmarshal(body, &d) == nil {
				got[i] = &d
			}
		}()
	}
	wg.Wait()
	v.mu.Lock()
	for i, j := range jobs {
		if e := v.details[j.id]; e != nil && got[i] != nil {
			e.d, e.ref = got[i], j.ref
		}
	}
	v.mu.Unlock()
}

// Fetch brings the details of ids (every unit with all) up to date now and
// publishes them; the API and the exports call it before they read.
func (v *View) Fetch(ctx context.Context, ids []string, all bool) {
	v.fetchDetails(ctx, ids, all)
	v.publish()
}

// publish merges the shards into a new snapshot when anything changed.
func (v *View) publish() {
	v.mu.Lock()
	defer v.mu.Unlock()
	var key strings.Builder
	for _, s := range v.shards {
		fmt.Fprintf(&key, "%s/%t;", s.ref, s.missingAt.IsZero())
	}
	for id, e := range v.details {
		if e.d != nil {
			fmt.Fprintf(&key, "%s@%s;", id, e.ref)
		}
	}
	if v.snap != nil && key.String() == v.snapKey {
		return
	}
	v.snapKey = key.String()
	v.snap = v.merge()
}

// merge builds the rig's snapshot from the shards' latest ones (v.mu held).
func (v *View) merge() *online.Snapshot {
	// The block: the one that began last among the shards (a shard still
	// on an older block is behind and its units wait).
	var base *shardState
	for _, s := range v.shards {
		if s.snap != nil && (base == nil || s.blockSince.After(base.blockSince)) {
			base = s
		}
	}
	if base == nil {
		return nil
	}
	head := *base.snap
	head.Units = nil
	var units []online.UnitSummary
	missing := false
	first := true
	for _, s := range v.shards {
		if !s.missingAt.IsZero() || s.snap == nil {
			missing = true
		}
		if s.snap == nil || s.snap.Block != head.Block {
			continue
		}
		units = append(units, s.snap.Units...)
		if s.missingAt.IsZero() && (first || s.snap.Bins < head.Bins) {
			// The rig's picture is as recent as its slowest shard.
			head.T, head.Bins, first = s.snap.T, s.snap.Bins, false
		}
	}
	sort.Slice(units, func(i, j int) bool { return units[i].ID < units[j].ID })
	head.Units = units
	sum := base.snap.Summary
	head.Summary = online.Summarize(units, float64(sum.Target), float64(sum.Fraction), float64(sum.ApertureFraction), geometryOf(sum))
	if missing {
		// Units that cannot be seen now cannot make the block ready.
		head.Summary.Ready = false
		if head.Summary.ETA == 0 {
			head.Summary.ETA = online.Float(math.NaN())
		}
	}
	details := make([]*online.UnitDetail, 0, len(v.details))
	for _, e := range v.details {
		if e.d != nil {
			details = append(details, e.d)
		}
	}
	return online.AssembleSnapshot(head, details)
}

// geometryOf recovers the screen geometry from a shard's summary: only the
// ratio of pixel size to distance enters the aperture's visual angle
// (ApertureDeg = 2·atan(Aperture·pixel/(2·distance))), and the shard's
// summary gives it when it has both numbers.
func geometryOf(s online.BlockSummary) *online.Geometry {
	a, deg := float64(s.Aperture), float64(s.ApertureDeg)
	if !(a > 0) || !(deg > 0) || math.IsInf(a, 0) || math.IsInf(deg, 0) {
		return nil
	}
	ratio := 2 * math.Tan(deg*math.Pi/360) / a
	return &online.Geometry{DistanceCM: 1, PixelSizeCM: ratio}
}

// Snapshot is the merged snapshot of the latest round (nil before any
// shard answered).
func (v *View) Snapshot() *online.Snapshot {
	v.mu.Lock()
	defer v.mu.Unlock()
	return v.snap
}

// ShardHealth is one shard in the view's Health.
type ShardHealth struct {
	Shard    string `json:"shard"`
	State    string `json:"state"` // ok, missing, never seen
	Instance string `json:"instance,omitempty"`
	HTTP     string `json:"http,omitempty"`
	Block    string `json:"block,omitempty"`
	Units    int    `json:"units"`
	LastSeen string `json:"last_seen,omitempty"`
	// MissingFor is the seconds since the shard stopped answering.
	MissingFor online.Float     `json:"missing_s"`
	Error      string           `json:"error,omitempty"`
	Health     *json.RawMessage `json:"health,omitempty"` // the worker's own /api/health
}

// Health is the merged view's health, shaped like a worker's where the page
// reads it (connection, durable, warning, shard, late spikes, refused
// messages, update time, lag), plus every shard's state.
type Health struct {
	Merged     bool              `json:"merged"`
	Rig        string            `json:"rig"`
	Prefix     string            `json:"prefix"`
	Connection string            `json:"connection"`
	Reconnects uint64            `json:"reconnects"`
	Durable    bool              `json:"durable"`
	Warning    string            `json:"warning,omitempty"`
	Shard      string            `json:"shard"`
	Shards     []ShardHealth     `json:"shards"`
	Missing    []string          `json:"missing"`
	Block      string            `json:"block"`
	Units      int               `json:"units"`
	LateSpikes uint64            `json:"late_spikes"`
	Rejected   map[string]uint64 `json:"rejected"`
	SlowDrops  int               `json:"slow_consumer_drops"`
	UpdateS    float64           `json:"update_s"`
	Lag        online.Float      `json:"lag_s"`
	Rounds     uint64            `json:"rounds"`
}

// workerHealth is the part of a worker's health the view adds up.
type workerHealth struct {
	Durable    bool              `json:"durable"`
	LateSpikes uint64            `json:"late_spikes"`
	Rejected   map[string]uint64 `json:"rejected"`
	SlowDrops  int               `json:"slow_consumer_drops"`
	UpdateS    float64           `json:"update_s"`
	Lag        online.Float      `json:"lag_s"`
}

// Health describes the view and its shards.
func (v *View) Health() any { return v.Counters() }

// Counters is Health as its type.
func (v *View) Counters() Health {
	now := time.Now()
	v.mu.Lock()
	defer v.mu.Unlock()
	h := Health{Merged: true, Rig: v.rig, Prefix: v.prefix, Connection: v.nc.Status().String(),
		Reconnects: v.nc.Stats().Reconnects, Rejected: map[string]uint64{}, Missing: []string{},
		Shards: []ShardHealth{}, Durable: v.count > 0, Lag: online.Float(math.NaN()), Rounds: v.rounds}
	if v.snap != nil {
		h.Block, h.Units = v.snap.Block, len(v.snap.Units)
	}
	var names []string
	var warn []string
	for _, s := range v.shards {
		sh := ShardHealth{Shard: s.shard.String(), Instance: s.instance, HTTP: s.http, Block: s.block,
			MissingFor: online.Float(math.NaN()), Error: s.err}
		names = append(names, sh.Shard)
		if s.snap != nil {
			sh.Units = len(s.snap.Units)
		}
		if s.everSeen {
			sh.LastSeen = s.lastSeen.UTC().Format(time.RFC3339)
		}
		switch {
		case !s.everSeen:
			sh.State = "never seen"
			h.Missing = append(h.Missing, sh.Shard)
			warn = append(warn, "shard "+sh.Shard+" has not answered")
		case !s.missingAt.IsZero():
			sh.State = "missing"
			sh.MissingFor = online.Float(now.Sub(s.missingAt).Seconds())
			h.Missing = append(h.Missing, sh.Shard)
			warn = append(warn, fmt.Sprintf("shard %s missing for %.0f s: its %d units show their last estimates", sh.Shard, float64(sh.MissingFor), sh.Units))
		default:
			sh.State = "ok"
		}
		if s.health != nil {
			raw := s.health
			sh.Health = &raw
			var w workerHealth
			if json.Unmarshal(s.health, &w) == nil {
				h.Durable = h.Durable && w.Durable
				h.LateSpikes += w.LateSpikes
				for k, n := range w.Rejected {
					h.Rejected[k] += n
				}
				h.SlowDrops += w.SlowDrops
				h.UpdateS = math.Max(h.UpdateS, w.UpdateS)
				if l := float64(w.Lag); !math.IsNaN(l) && !(float64(h.Lag) >= l) {
					h.Lag = w.Lag
				}
			}
		} else {
			h.Durable = false
		}
		h.Shards = append(h.Shards, sh)
	}
	switch {
	case v.count == 0:
		h.Shard = "none announced"
		h.Warning = "no worker of rig " + v.rig + " has announced itself yet"
	default:
		h.Shard = strings.Join(names, " + ")
		if len(warn) > 0 {
			h.Warning = strings.Join(warn, "; ") + "; READY waits for every shard"
		}
	}
	return h
}

// Reset forgets the running block's estimates on every shard.
func (v *View) Reset() {
	for _, err := range v.toAll(Control{Command: "reset"}) {
		v.opt.Logger.Warn("livefield: reset", "rig", v.rig, "err", err)
	}
}

// FlagSTC asks the shard that owns the unit for (or to stop) STC on it.
func (v *View) FlagSTC(id string, on bool) error {
	v.mu.Lock()
	n := v.count
	v.mu.Unlock()
	if n == 0 {
		return errors.New("no shard of the rig has announced itself")
	}
	c := Control{Command: "unflag_stc", ID: id}
	if on {
		c.Command = "flag_stc"
	}
	sh := ingest.Shard{Index: ingest.ShardOf(id, n), Count: n}
	if _, err := request(context.Background(), v.nc, ShardSubject(v.prefix, sh)+".control", c, v.opt.Timeout); err != nil {
		return fmt.Errorf("shard %s, which maps unit %s: %w", sh, id, err)
	}
	return nil
}

// SetCriterion changes the criterion on every shard; a shard that is
// missing gets it when it answers again.
func (v *View) SetCriterion(target, fraction float64) error {
	c := online.Criterion{Target: target, Fraction: fraction}
	v.mu.Lock()
	v.crit = &c
	v.mu.Unlock()
	if errs := v.toAll(Control{Command: "criterion", Target: target, Fraction: fraction}); len(errs) > 0 {
		return errors.Join(errs...)
	}
	return nil
}

// resendCriterion gives the criterion set here to a shard whose summary
// shows another (one that was missing or restarted).
func (v *View) resendCriterion(ctx context.Context) {
	v.mu.Lock()
	c := v.crit
	var subjs []string
	if c != nil {
		for _, s := range v.shards {
			if s.missingAt.IsZero() && s.snap != nil &&
				(float64(s.snap.Summary.Target) != c.Target || float64(s.snap.Summary.Fraction) != c.Fraction) {
				subjs = append(subjs, ShardSubject(v.prefix, s.shard)+".control")
			}
		}
	}
	v.mu.Unlock()
	for _, subj := range subjs {
		_, _ = request(ctx, v.nc, subj, Control{Command: "criterion", Target: c.Target, Fraction: c.Fraction}, v.opt.Timeout)
	}
}

// toAll sends a control to every shard and returns the failures.
func (v *View) toAll(c Control) []error {
	v.mu.Lock()
	shards := make([]ingest.Shard, len(v.shards))
	for i, s := range v.shards {
		shards[i] = s.shard
	}
	v.mu.Unlock()
	if len(shards) == 0 {
		return []error{errors.New("no shard of the rig has announced itself")}
	}
	errs := make([]error, len(shards))
	var wg sync.WaitGroup
	for i, sh := range shards {
		wg.Add(1)
		go func() {
			defer wg.Done()
			if _, err := request(context.Background(), v.nc, ShardSubject(v.prefix, sh)+".control", c, v.opt.Timeout); err != nil {
				errs[i] = fmt.Errorf("shard %s: %w", sh, err)
			}
		}()
	}
	wg.Wait()
	var out []error
	for _, err := range errs {
		if err != nil {
			out = append(out, err)
		}
	}
	return out
}
