package binning

import (
	"fmt"
	"maps"
	"math"
	"math/rand/v2"
	"reflect"
	"slices"
	"strings"
	"testing"

	"livefield/online"
)

// drain collects all closed bins.
func drain(b *Binner) []Bin {
	var out []Bin
	var x Bin
	for b.Next(&x) {
		c := x
		c.Counts = append([]online.Count(nil), x.Counts...)
		out = append(out, c)
	}
	return out
}

func cnt(pairs ...float64) []online.Count {
	var c []online.Count
	for i := 0; i < len(pairs); i += 2 {
		c = append(c, online.Count{Unit: int(pairs[i]), N: pairs[i+1]})
	}
	return c
}

// TestBins checks bin edges, frame indices and counts on hand-made
// sequences. The half-open bin [onset, next onset) and the splitting of held
// frames into round(d/period) bins are the rules of the package doc; a bin
// per displayed frame is common practice, no source.
func TestBins(t *testing.T) {
	type spikes struct {
		u []int
		t []float64
	}
	tests := []struct {
		name    string
		frames  []float64 // onsets; frame index = 10 + position
		spikes  spikes
		end     float64
		want    []Bin
		wantSt  Stats
		checkSt func(Stats) string
	}{
		{
			name:   "plain",
			frames: []float64{1, 2, 3},
			spikes: spikes{[]int{0, 1, 0, 0, 2}, []float64{1, 1.5, 1.999, 2, 3.5}},
			end:    4,
			want: []Bin{
				{Frame: 10, Start: 1, End: 2, Counts: cnt(0, 2, 1, 1)},
				{Frame: 11, Start: 2, End: 3, Counts: cnt(0, 1)},
				{Frame: 12, Start: 3, End: 4, Counts: cnt(2, 1)},
			},
			wantSt: Stats{Frames: 3, Bins: 3, Spikes: 5, Binned: 5},
		},
		{
			name:   "held frame split in 3",
			frames: []float64{0, 1, 4.1, 5},
			spikes: spikes{[]int{3, 3, 3}, []float64{1.2, 2.5, 4.05}},
			end:    6,
			want: []Bin{
				{Frame: 10, Start: 0, End: 1},
				{Frame: 11, Start: 1, End: 1 + 3.1/3, Held: true, Counts: cnt(3, 1)},
				{Frame: 11, Start: 1 + 3.1/3, End: 1 + 2*3.1/3, Held: true, Counts: cnt(3, 1)},
				{Frame: 11, Start: 1 + 2*3.1/3, End: 4.1, Held: true, Counts: cnt(3, 1)},
				{Frame: 12, Start: 4.1, End: 5},
				{Frame: 13, Start: 5, End: 6},
			},
			wantSt: Stats{Frames: 4, Bins: 6, HeldFrames: 1, HeldBins: 3, Spikes: 3, Binned: 3},
		},
		{
			name:   "1.5 periods is not held, 1.6 is split in 2",
			frames: []float64{0, 1.5, 3.1},
			end:    4.1,
			want: []Bin{
				{Frame: 10, Start: 0, End: 1.5},
				{Frame: 11, Start: 1.5, End: 2.3, Held: true},
				{Frame: 11, Start: 2.3, End: 3.1, Held: true},
				{Frame: 12, Start: 3.1, End: 4.1},
			},
			wantSt: Stats{Frames: 3, Bins: 4, HeldFrames: 1, HeldBins: 2},
		},
		{
			name:   "before and after the block",
			frames: []float64{1, 2},
			spikes: spikes{[]int{0, 0, 0, 0}, []float64{0.5, 0.999, 2.5, 3}},
			end:    3,
			want: []Bin{
				{Frame: 10, Start: 1, End: 2},
				{Frame: 11, Start: 2, End: 3, Counts: cnt(0, 1)},
			},
			wantSt: Stats{Frames: 2, Bins: 2, Spikes: 4, Binned: 1, BeforeBlock: 2, AfterBlock: 1},
		},
		{
			name:   "gap longer than MaxGap is not binned",
			frames: []float64{0, 1, 30, 31},
			spikes: spikes{[]int{1, 1, 1}, []float64{0.5, 10, 30.5}},
			end:    32,
			want: []Bin{
				{Frame: 10, Start: 0, End: 1, Counts: cnt(1, 1)},
				{Frame: 12, Start: 30, End: 31, Counts: cnt(1, 1)},
				{Frame: 13, Start: 31, End: 32},
			},
			wantSt: Stats{Frames: 4, Bins: 3, Gaps: 1, Spikes: 3, Binned: 2, GapSpikes: 1},
		},
		{
			name:   "invalid spikes",
			frames: []float64{0, 1},
			spikes: spikes{[]int{-1, 0, 70000, 0}, []float64{0.5, math.NaN(), 0.5, math.Inf(1)}},
			end:    2,
			want:   []Bin{{Frame: 10, Start: 0, End: 1}, {Frame: 11, Start: 1, End: 2}},
			wantSt: Stats{Frames: 2, Bins: 2, Spikes: 4, Invalid: 4},
		},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			b, err := New(Config{FramePeriod: 1})
			if err != nil {
				t.Fatal(err)
			}
			// Spikes first: they wait for their frames.
			b.AddSpikes(tc.spikes.u, tc.spikes.t)
			idx := make([]int64, len(tc.frames))
			for i := range idx {
				idx[i] = int64(10 + i)
			}
			if err := b.AddFrames(idx, tc.frames); err != nil {
				t.Fatal(err)
			}
			if err := b.End(tc.end); err != nil {
				t.Fatal(err)
			}
			b.Flush()
			got := drain(b)
			if len(got) != len(tc.want) {
				t.Fatalf("got %d bins, want %d:\n%+v", len(got), len(tc.want), got)
			}
			for i := range got {
				g, w := got[i], tc.want[i]
				if g.Frame != w.Frame || math.Abs(g.Start-w.Start) > 1e-12 || math.Abs(g.End-w.End) > 1e-12 || g.Held != w.Held || !reflect.DeepEqual(g.Counts, w.Counts) && (len(g.Counts)+len(w.Counts) > 0) {
					t.Errorf("bin %d = %+v, want %+v", i, g, w)
				}
			}
			st := b.Stats()
			st.Watermark = 0
			if st != tc.wantSt {
				t.Errorf("stats\n got %+v\nwant %+v", st, tc.wantSt)
			}
		})
	}
}

// TestWatermarkGrace: a bin closes only when the watermark (latest spike or
// Advance time) reaches its end + grace; a spike in a closed bin is late.
func TestWatermarkGrace(t *testing.T) {
	b, _ := New(Config{FramePeriod: 0.1, Grace: 0.25})
	if err := b.AddFrames([]int64{0, 1, 2, 3}, []float64{0, 0.1, 0.2, 0.3}); err != nil {
		t.Fatal(err)
	}
	var x Bin
	steps := []struct {
		advance   float64 // Advance (NaN: a spike of unit 2 at spike instead)
		spike     float64
		wantBins  int   // bins handed out by Next after the step
		wantLate  int64 // late spikes so far
		wantFrame int64 // frame of the last bin handed out
	}{
		{advance: 0.3, wantBins: 0},
		{advance: math.NaN(), spike: 0.349, wantBins: 0},
		{advance: math.NaN(), spike: 0.35, wantBins: 1, wantFrame: 0}, // 0.1 + 0.25
		{advance: math.NaN(), spike: 0.05, wantBins: 0, wantLate: 1},  // in closed bin 0
		{advance: 0.45, wantBins: 1, wantLate: 1, wantFrame: 1},       // closes [0.1,0.2)
		{advance: 0.4, wantBins: 0, wantLate: 1},                      // watermark never goes back
		{advance: 10, wantBins: 1, wantLate: 1, wantFrame: 2},         // [0.3, …) has no end yet
		{advance: math.NaN(), spike: 0.15, wantBins: 0, wantLate: 2},  // late
		{advance: math.NaN(), spike: 0.35, wantBins: 0, wantLate: 2},  // waits for its end
	}
	for i, s := range steps {
		if math.IsNaN(s.advance) {
			b.AddSpikes([]int{2}, []float64{s.spike})
		} else {
			b.Advance(s.advance)
		}
		n := 0
		for b.Next(&x) {
			n++
			if x.Frame != s.wantFrame {
				t.Errorf("step %d: bin of frame %d, want %d", i, x.Frame, s.wantFrame)
			}
		}
		if n != s.wantBins || b.Stats().LateSpikes != s.wantLate || b.Late(2) != s.wantLate {
			t.Fatalf("step %d: %d bins, late %d (unit 2: %d); want %d bins, %d late", i, n, b.Stats().LateSpikes, b.Late(2), s.wantBins, s.wantLate)
		}
	}
	if b.Late(0) != 0 || b.Late(-1) != 0 {
		t.Error("late spikes attributed to the wrong unit")
	}
	// End closes the last interval [0.3, 0.4); the watermark (10) is
	// already past 0.4 + 0.25, so its bin closes at once.
	if err := b.End(0.4); err != nil {
		t.Fatal(err)
	}
	if !b.Next(&x) || x.Frame != 3 || x.End != 0.4 || !reflect.DeepEqual(x.Counts, cnt(2, 3)) {
		t.Fatalf("last bin %+v", x)
	}
}

// TestEndWaitsForGrace: End closes the last interval, but its bin waits for
// the grace unless Flush is called.
func TestEndWaitsForGrace(t *testing.T) {
	b, _ := New(Config{FramePeriod: 1, Grace: 0.5})
	b.AddFrames([]int64{7}, []float64{0})
	b.AddSpikes([]int{1}, []float64{0.9})
	if err := b.End(1); err != nil {
		t.Fatal(err)
	}
	var x Bin
	if b.Next(&x) {
		t.Fatal("bin closed before watermark reached end + grace")
	}
	b.AddSpikes([]int{1}, []float64{1.2}) // after the block
	if b.Next(&x) {
		t.Fatal("bin closed at watermark 1.2 < 1.5")
	}
	b.Flush()
	if !b.Next(&x) || x.Frame != 7 || !reflect.DeepEqual(x.Counts, cnt(1, 1)) {
		t.Fatalf("bin %+v", x)
	}
	if st := b.Stats(); st.AfterBlock != 1 || st.Binned != 1 {
		t.Errorf("stats %+v", st)
	}
	if err := b.AddFrames([]int64{8}, []float64{2}); err == nil || !strings.Contains(err.Error(), "after the block end") {
		t.Errorf("frame after End: %v", err)
	}
	if err := b.End(3); err == nil {
		t.Error("second End accepted")
	}
}

func TestRejectedFrames(t *testing.T) {
	tests := []struct {
		name     string
		onsets   []float64
		want     string
		rejected int64
		bins     int
	}{
		{"backward", []float64{0, 1, 0.5, 2}, "not after the previous onset 1", 1, 2},
		{"repeated", []float64{0, 1, 1, 2}, "not after", 1, 2},
		{"NaN", []float64{0, math.NaN(), 1}, "not finite", 1, 1},
		{"Inf", []float64{0, math.Inf(1), 1}, "not finite", 1, 1},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			b, _ := New(Config{FramePeriod: 1})
			idx := make([]int64, len(tc.onsets))
			err := b.AddFrames(idx, tc.onsets)
			if err == nil || !strings.HasPrefix(err.Error(), "binning: ") || !strings.Contains(err.Error(), tc.want) {
				t.Fatalf("error %v, want %q", err, tc.want)
			}
			b.Flush()
			if n := len(drain(b)); n != tc.bins || b.Stats().RejectedFrames != tc.rejected {
				t.Errorf("%d bins, %d rejected; want %d, %d", n, b.Stats().RejectedFrames, tc.bins, tc.rejected)
			}
		})
	}
	b, _ := New(Config{FramePeriod: 1})
	if err := b.AddFrames([]int64{1, 2}, []float64{0}); err == nil {
		t.Error("length mismatch accepted")
	}
	if err := b.End(1); err == nil {
		t.Error("End without frames accepted")
	}
}

func TestNewErrors(t *testing.T) {
	for _, c := range []Config{
		{},
		{FramePeriod: -1},
		{FramePeriod: math.NaN()},
		{FramePeriod: math.Inf(1)},
		{FramePeriod: 1, Grace: -1},
		{FramePeriod: 1, MaxGap: 1},
		{FramePeriod: 1, MaxUnits: -3},
		{FramePeriod: 1, MaxPending: -1},
	} {
		if _, err := New(c); err == nil || !strings.HasPrefix(err.Error(), "binning: ") {
			t.Errorf("New(%+v) error %v", c, err)
		}
	}
	b, err := New(Config{FramePeriod: 1.0 / 60})
	if err != nil || b.Config().Grace != DefaultGrace {
		t.Errorf("defaults: %+v, %v", b.Config(), err)
	}
}

func TestOverflow(t *testing.T) {
	b, _ := New(Config{FramePeriod: 1, MaxPending: 3})
	b.AddFrames([]int64{0}, []float64{0})
	b.AddSpikes([]int{0, 0, 0, 0, 0}, []float64{1, 2, 3, 4, 5})
	if st := b.Stats(); st.Overflow != 2 || st.Pending != 3 {
		t.Errorf("stats %+v, want 2 overflow, 3 pending", st)
	}
}

// TestEverySpikeCountedOnce is a property test: with random frame timing
// (jitter, held frames, gaps), spikes in random order and random Advance
// calls, each spike ends up exactly once as binned (and in exactly one bin
// handed out), late, before or after the block, in a gap, or invalid; and
// each binned spike lies in its bin.
func TestEverySpikeCountedOnce(t *testing.T) {
	for seed := uint64(1); seed <= 20; seed++ {
		t.Run(fmt.Sprint(seed), func(t *testing.T) {
			rng := rand.New(rand.NewPCG(seed, 99))
			// Even seeds: grace above the 0.03 s arrival jitter, so no
			// spike is late and every bin can be checked exactly.
			grace := 0.02 * rng.Float64()
			if seed%2 == 0 {
				grace = 0.04
			}
			b, _ := New(Config{FramePeriod: 0.01, Grace: grace, MaxGap: 0.5})
			var onsets []float64
			tt := 1.0
			for i := 0; i < 300; i++ {
				onsets = append(onsets, tt)
				switch r := rng.Float64(); {
				case r < 0.05:
					tt += 0.01 * float64(2+rng.IntN(3)) // held
				case r < 0.06:
					tt += 0.6 // gap
				default:
					tt += 0.01 * (0.9 + 0.2*rng.Float64())
				}
			}
			end := tt
			var su []int
			var st []float64
			for i := 0; i < 5000; i++ {
				su = append(su, rng.IntN(8))
				st = append(st, 0.9+(end-0.8)*rng.Float64())
			}
			// spikes arrive roughly in time order, with jitter
			order := make([]int, len(st))
			for i := range order {
				order[i] = i
			}
			key := make([]float64, len(st))
			for i := range key {
				key[i] = st[i] + 0.03*rng.Float64()
			}
			sortBy(order, key)
			var bins []Bin
			var x Bin
			fi, si := 0, 0
			for fi < len(onsets) || si < len(order) {
				if fi < len(onsets) && (si >= len(order) || rng.IntN(3) == 0) {
					k := min(len(onsets)-fi, 1+rng.IntN(4))
					idx := make([]int64, k)
					for j := range idx {
						idx[j] = int64(fi + j)
					}
					if err := b.AddFrames(idx, onsets[fi:fi+k]); err != nil {
						t.Fatal(err)
					}
					fi += k
				} else if si < len(order) {
					k := min(len(order)-si, 1+rng.IntN(20))
					u := make([]int, k)
					ts := make([]float64, k)
					for j := range u {
						u[j], ts[j] = su[order[si+j]], st[order[si+j]]
					}
					b.AddSpikes(u, ts)
					si += k
				}
				if rng.IntN(10) == 0 {
					b.Advance(b.Stats().Watermark + 0.01*rng.Float64())
				}
				for b.Next(&x) {
					c := x
					c.Counts = append([]online.Count(nil), x.Counts...)
					bins = append(bins, c)
				}
			}
			if err := b.End(end); err != nil {
				t.Fatal(err)
			}
			b.Flush()
			bins = append(bins, drain(b)...)
			s := b.Stats()
			sum := s.Binned + s.LateSpikes + s.BeforeBlock + s.AfterBlock + s.GapSpikes + s.Invalid + s.Overflow + s.Pending
			if s.Spikes != int64(len(st)) || sum != s.Spikes {
				t.Fatalf("spikes %d (sent %d), categories add to %d: %+v", s.Spikes, len(st), sum, s)
			}
			var inBins float64
			for i, bn := range bins {
				if i > 0 && bn.Start != bins[i-1].End && !(bn.Start > bins[i-1].End) {
					t.Fatalf("bins %d and %d overlap", i-1, i)
				}
				if bn.End-bn.Start > 0.015 || bn.End-bn.Start < 0.005 {
					t.Fatalf("bin %+v is not about one period long", bn)
				}
				for _, c := range bn.Counts {
					inBins += c.N
				}
			}
			if inBins != float64(s.Binned) {
				t.Fatalf("bins hold %v spikes, Binned %d", inBins, s.Binned)
			}
			if s.Bins != int64(len(bins)) || s.HeldFrames == 0 || s.Gaps == 0 {
				t.Fatalf("stats %+v, %d bins", s, len(bins))
			}
			var late int64
			for u := 0; u < 8; u++ {
				late += b.Late(u)
			}
			if late != s.LateSpikes {
				t.Fatalf("per-unit late %d != %d", late, s.LateSpikes)
			}
			if seed%2 == 1 {
				if s.LateSpikes == 0 {
					t.Fatal("short grace gave no late spikes: the test lost its point")
				}
				return
			}
			// No late spikes: each bin holds exactly the spikes of its
			// interval, counted directly.
			if s.LateSpikes != 0 {
				t.Fatalf("%d late spikes with grace above the jitter", s.LateSpikes)
			}
			for _, bn := range bins {
				var direct [8]float64
				for i, ti := range st {
					if ti >= bn.Start && ti < bn.End {
						direct[su[i]]++
					}
				}
				var got [8]float64
				for _, c := range bn.Counts {
					got[c.Unit] = c.N
				}
				if got != direct {
					t.Fatalf("bin %+v: counts %v, direct %v", bn, got, direct)
				}
			}
		})
	}
}

func sortBy(order []int, key []float64) {
	// insertion-free: use the standard sort on a key copy
	type kv struct {
		k float64
		i int
	}
	tmp := make([]kv, len(order))
	for j, i := range order {
		tmp[j] = kv{key[i], i}
	}
	slices.SortFunc(tmp, func(a, b kv) int {
		switch {
		case a.k < b.k:
			return -1
		case a.k > b.k:
			return 1
		}
		return 0
	})
	for j := range tmp {
		order[j] = tmp[j].i
	}
}

// steady feeds one frame and its spikes and drains the closed bins.
type steady struct {
	b     *Binner
	idx   []int64
	on    []float64
	units []int
	ts    []float64
	bin   Bin
	f     int64
}

func newSteady(spikesPerFrame int) *steady {
	b, _ := New(Config{FramePeriod: 1.0 / 60, Grace: 0.25})
	s := &steady{b: b, idx: make([]int64, 1), on: make([]float64, 1), units: make([]int, spikesPerFrame), ts: make([]float64, spikesPerFrame)}
	for i := range s.units {
		s.units[i] = (i * 7) % 200
	}
	for i := 0; i < 200; i++ {
		s.step()
	}
	return s
}

func (s *steady) step() int {
	t0 := float64(s.f) / 60
	s.idx[0], s.on[0] = s.f, t0
	s.b.AddFrames(s.idx, s.on)
	for i := range s.ts {
		s.ts[i] = t0 + float64(i)/float64(len(s.ts))/60
	}
	s.b.AddSpikes(s.units, s.ts)
	n := 0
	for s.b.Next(&s.bin) {
		n++
	}
	s.f++
	return n
}

func TestSteadyStateNoAlloc(t *testing.T) {
	s := newSteady(50)
	if a := testing.AllocsPerRun(500, func() { s.step() }); a != 0 {
		t.Errorf("%v allocations per frame, want 0", a)
	}
	if st := s.b.Stats(); st.Binned == 0 || st.Bins == 0 || st.LateSpikes != 0 {
		t.Errorf("stats %+v", st)
	}
}

func BenchmarkAddSpikesNext(b *testing.B) {
	for _, k := range []int{10, 100, 1000} {
		b.Run(fmt.Sprintf("spikes_per_frame=%d", k), func(b *testing.B) {
			s := newSteady(k)
			b.ReportAllocs()
			for b.Loop() {
				s.step()
			}
			b.ReportMetric(float64(b.N*k)/b.Elapsed().Seconds(), "spikes/s")
		})
	}
}

// TestCountsInUnitOrder: a bin's counts are one entry per unit that spiked
// in it, in increasing unit order, whatever order the spikes came in, for
// unit indices that span several 64-unit words of the tally (the bin's
// counts by their definition, tallied by a map and sorted; common
// practice, no source).
func TestCountsInUnitOrder(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 12))
	b, _ := New(Config{FramePeriod: 0.01, Grace: 0.001, MaxGap: 0.5})
	const frames, units = 60, 300
	idx, ts := make([]int64, frames), make([]float64, frames)
	for i := range frames {
		idx[i], ts[i] = int64(i), 1+0.01*float64(i)
	}
	if err := b.AddFrames(idx, ts); err != nil {
		t.Fatal(err)
	}
	want := make([]map[int]float64, frames-1)
	var su []int
	var st []float64
	for k := range want {
		want[k] = map[int]float64{}
		for range rng.IntN(80) {
			u := rng.IntN(units)
			if rng.IntN(4) == 0 {
				u = rng.IntN(3) // some units spike often
			}
			su = append(su, u)
			st = append(st, ts[k]+0.01*rng.Float64()*0.999)
			want[k][u]++
		}
	}
	rng.Shuffle(len(su), func(i, j int) { su[i], su[j] = su[j], su[i]; st[i], st[j] = st[j], st[i] })
	b.AddSpikes(su, st)
	if err := b.AddFrames([]int64{frames}, []float64{1 + 0.01*frames}); err != nil {
		t.Fatal(err)
	}
	b.Flush()
	got := drain(b)
	if len(got) < len(want) {
		t.Fatalf("%d bins, want at least %d", len(got), len(want))
	}
	for k, w := range want {
		var exp []online.Count
		for _, u := range slices.Sorted(maps.Keys(w)) {
			exp = append(exp, online.Count{Unit: u, N: w[u]})
		}
		if !reflect.DeepEqual(got[k].Counts, exp) {
			t.Fatalf("bin %d: counts %v, want %v", k, got[k].Counts, exp)
		}
	}
}
