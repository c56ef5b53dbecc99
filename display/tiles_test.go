package display

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"net"
	"sync/atomic"
	"testing"
	"time"

	"github.com/gorilla/websocket"

	"livefield/online"
)

// tileMessage is the snapshot message as the page reads it.
type tileMessage struct {
	Type     string `json:"type"`
	Snapshot struct {
		Density  string `json:"density"`
		Shape    [3]int `json:"shape"`
		MapBlock int    `json:"map_block"`
		Units    []struct {
			ID       string    `json:"id"`
			Map      []*int    `json:"map"`
			MapShape *[2]int   `json:"map_shape"`
			MapMax   *float64  `json:"map_max"`
			Rel      *float64  `json:"reliability"`
			Extra    *struct{} `json:"sta"` // never sent with the tiles
		} `json:"units"`
	} `json:"snapshot"`
}

func readTiles(t *testing.T, c *websocket.Conn) tileMessage {
	t.Helper()
	for {
		var m tileMessage
		readInto(t, c, &m)
		if m.Type == typeSnapshot {
			return m
		}
	}
}

// Each browser gets the tiles at the density it asked for: the full map,
// a map averaged down to at most MediumSide a side, or none.
func TestHubDensity(t *testing.T) {
	snap := simulated(t)
	h, srv := startHub(t, "", nil)
	c := dial(t, wsURL(srv), nil)
	waitFor(t, "client", func() bool { return h.Stats().Clients == 1 })
	h.Publish(snap)
	first := readTiles(t, c)
	if first.Snapshot.Density != string(Large) {
		t.Fatalf("default density %q, want large", first.Snapshot.Density)
	}
	// A page may give its density when it connects.
	early := dial(t, wsURL(srv)+"?density=compact", nil)
	waitFor(t, "second client", func() bool { return h.Stats().Clients == 2 })
	if m := readTiles(t, early); m.Snapshot.Density != string(Compact) || m.Snapshot.Units[0].Map != nil {
		t.Fatalf("first update of a page that asked for compact tiles: density %q", m.Snapshot.Density)
	}
	tests := []struct {
		density    Density
		rows, cols int // 0: no map
		block      int
	}{
		{Compact, 0, 0, 0},
		{Medium, MediumSide, MediumSide, simWidth / MediumSide},
		{Large, simHeight, simWidth, 1},
	}
	for _, tc := range tests {
		t.Run(string(tc.density), func(t *testing.T) {
			if err := c.WriteJSON(viewRequest{Density: string(tc.density)}); err != nil {
				t.Fatal(err)
			}
			m := readTiles(t, c)
			if m.Snapshot.Density != string(tc.density) || len(m.Snapshot.Units) != len(snap.Units) || m.Snapshot.MapBlock != tc.block {
				t.Fatalf("density %q with %d units, map block %d (want %d)", m.Snapshot.Density, len(m.Snapshot.Units), m.Snapshot.MapBlock, tc.block)
			}
			for i, u := range m.Snapshot.Units {
				if u.ID != snap.Units[i].ID || u.Extra != nil {
					t.Fatalf("unit %d: id %q (want %q), estimate sent: %v", i, u.ID, snap.Units[i].ID, u.Extra != nil)
				}
				if tc.rows == 0 {
					if u.Map != nil || u.MapShape != nil {
						t.Fatalf("unit %s: compact tile carries a map", u.ID)
					}
					continue
				}
				if u.MapShape == nil || *u.MapShape != [2]int{tc.rows, tc.cols} || len(u.Map) != tc.rows*tc.cols {
					t.Fatalf("unit %s: map %v with %d values, want %d×%d", u.ID, u.MapShape, len(u.Map), tc.rows, tc.cols)
				}
				// The strongest level is ±100 and sits where the field is.
				best, at := 0, -1
				for p, v := range u.Map {
					if v != nil && abs(*v) > best {
						best, at = abs(*v), p
					}
				}
				if best != mapLevels {
					t.Fatalf("unit %s: largest level %d, want %d", u.ID, best, mapLevels)
				}
				for _, cell := range simCells {
					if cell.id != u.ID || cell.fieldless {
						continue
					}
					scale := float64(simWidth) / float64(tc.cols)
					col, row := float64(at%tc.cols)*scale+scale/2-0.5, float64(at/tc.cols)*scale+scale/2-0.5
					if math.Abs(col-cell.x) > scale+1 || math.Abs(row-cell.y) > scale+1 {
						t.Errorf("unit %s: strongest map pixel at (%v, %v), field at (%v, %v)", u.ID, col, row, cell.x, cell.y)
					}
				}
			}
		})
	}
}

func abs(v int) int {
	if v < 0 {
		return -v
	}
	return v
}

func TestShrink(t *testing.T) {
	nan := online.Float(math.NaN())
	m := online.Floats{
		1, 2, 3, 4, 5,
		5, 6, 7, 8, nan,
		9, 9, nan, nan, 1,
	}
	got, h, w := shrink(m, 3, 5, 3)
	// Blocks of 2×2 (the smallest factor that brings 5 columns to 3).
	want := online.Floats{3.5, 5.5, 5, 9, nan, 1}
	if h != 2 || w != 3 || len(got) != len(want) {
		t.Fatalf("shrink to %d×%d (%v), want 2×3", h, w, got)
	}
	for i := range want {
		if a, b := float64(got[i]), float64(want[i]); !(a == b || math.IsNaN(a) && math.IsNaN(b)) {
			t.Fatalf("shrink = %v, want %v", got, want)
		}
	}
	if _, h, w := shrink(m, 3, 5, 8); h != 3 || w != 5 {
		t.Fatalf("a map within the side was shrunk to %d×%d", h, w)
	}
}

func TestQuantise(t *testing.T) {
	q, top := quantise(online.Floats{0.5, -2, online.Float(math.NaN()), 0.004, 1})
	b, _ := json.Marshal(q)
	if string(b) != "[25,-100,null,0,50]" || top != 2 {
		t.Fatalf("quantise = %s, max %v", b, top)
	}
	q, top = quantise(online.Floats{0, 0})
	if b, _ := json.Marshal(q); string(b) != "[0,0]" || top != 0 {
		t.Fatalf("flat map = %s, max %v", b, top)
	}
	// In a whole tile: plain integers, or null where a value is undefined.
	for _, tc := range []struct {
		m    online.Floats
		want string
	}{
		{online.Floats{1, -0.5, 0, 0.25}, `"map":[100,-50,0,25]`},
		{online.Floats{1, online.Float(math.NaN()), 0, 0.25}, `"map":[100,null,0,25]`},
	} {
		s := &online.Snapshot{Shape: [3]int{1, 2, 2}, Units: []online.UnitSummary{{ID: "1", Map: tc.m}}}
		b, err := encodeTiles(s, Large)
		if err != nil || !bytes.Contains(b, []byte(tc.want)) {
			t.Errorf("tile of %v: %s (%v), want it to hold %s", tc.m, b, err, tc.want)
		}
	}
}

// syntheticSnapshot makes a block of n units on a 16×16 stimulus for the
// page and the benchmarks: fields at random places with random strength,
// the numbers of a block a few minutes in (invented, for display only).
func syntheticSnapshot(n int, seed uint64) *online.Snapshot {
	const width, height, lags = 16, 16, 12
	rng := rand.New(rand.NewPCG(seed, 3))
	statuses := []online.Status{online.Collecting, online.Emerging, online.Emerging, online.Reliable, online.Reliable, online.NoField}
	s := &online.Snapshot{Block: "probe-1", T: 431.6, Bins: 25896, Shape: [3]int{lags, height, width},
		FramePeriod: 1.0 / 60, Lambda: 100}
	reliable := 0
	perChannel := map[int]int{}
	for i := range n {
		ch := i * 96 / n
		perChannel[ch]++
		u := online.UnitSummary{
			ID:     fmt.Sprintf("ch%02d.%d", ch, perChannel[ch]),
			Spikes: int64(200 + rng.IntN(6000)),
			Status: statuses[rng.IntN(len(statuses))],
		}
		strength := 0.0
		switch u.Status {
		case online.Reliable:
			u.Reliability, strength = online.Float(0.9+0.09*rng.Float64()), 1
			reliable++
		case online.Emerging:
			u.Reliability, strength = online.Float(0.3+0.6*rng.Float64()), 0.5
			u.ETA = online.Float(30 + 900*rng.Float64())
		default:
			u.Reliability = online.Float(0.3 * rng.Float64())
			u.ETA = online.Float(math.NaN())
		}
		if u.Status == online.Reliable {
			u.ETA = 0
		}
		u.Significance = online.Float(strength*12 + rng.Float64())
		u.PValue = online.Float(math.Pow(10, -float64(u.Significance)))
		u.Rate = online.Float(u.Spikes) / s.T
		u.PeakLag = 3 + rng.IntN(3)
		u.LatencyMS = online.Float(float64(u.PeakLag) * 1000 / 60)
		cx, cy, sg := 2+12*rng.Float64(), 2+12*rng.Float64(), 1+1.5*rng.Float64()
		u.CentreX, u.CentreY, u.SigmaX, u.SigmaY = online.Float(cx), online.Float(cy), online.Float(sg), online.Float(sg*0.8)
		u.Polarity = 1 - 2*rng.IntN(2)
		u.Map = make(online.Floats, width*height)
		for p := range u.Map {
			dx, dy := float64(p%width)-cx, float64(p/width)-cy
			u.Map[p] = online.Float(strength*float64(u.Polarity)*math.Exp(-(dx*dx+dy*dy)/(2*sg*sg)) + 0.15*rng.NormFloat64())
		}
		u.Flagged = rng.IntN(40) == 0
		s.Units = append(s.Units, u)
	}
	s.Summary = online.BlockSummary{Units: n, Significant: n * 3 / 4, Reliable: reliable, Target: 0.9, Fraction: 0.8,
		ETA: 412, CentreX: 8, CentreY: 8, SpreadX: 3, SpreadY: 3, SuggestX: 8, SuggestY: 8, Aperture: 12, ApertureFraction: 0.9}
	return s
}

// countingConn counts the bytes read from the connection: the size of the
// compressed messages on the wire.
type countingConn struct {
	net.Conn
	read atomic.Int64
}

func (c *countingConn) Read(b []byte) (int, error) {
	n, err := c.Conn.Read(b)
	c.read.Add(int64(n))
	return n, err
}

// BenchmarkHubTiles measures one update at 384 and 1024 units for a
// browser at each density: the hub's time from Publish until the browser
// has read the update (encoding, once per density, and the loopback write),
// the bytes of the update's websocket message, and the bytes on the wire
// with per-message compression, as a browser negotiates it.
func BenchmarkHubTiles(b *testing.B) {
	for _, n := range []int{384, 1024} {
		snap := syntheticSnapshot(n, 1)
		for _, d := range []Density{Large, Medium, Compact} {
			b.Run(fmt.Sprintf("units=%d/density=%s", n, d), func(b *testing.B) {
				h, srv := startHub(b, "", nil)
				var wire countingConn
				dialer := websocket.Dialer{
					EnableCompression: true, // as browsers do
					NetDialContext: func(ctx context.Context, network, addr string) (net.Conn, error) {
						conn, err := (&net.Dialer{}).DialContext(ctx, network, addr)
						wire.Conn = conn
						return &wire, err
					},
				}
				c, _, err := dialer.Dial(wsURL(srv), nil)
				if err != nil {
					b.Fatal(err)
				}
				defer c.Close()
				if err := c.WriteJSON(viewRequest{Density: string(d)}); err != nil {
					b.Fatal(err)
				}
				for h.Stats().Clients < 1 {
					time.Sleep(time.Millisecond)
				}
				// Warm up until the hub sends at density d; from then on each
				// Publish is answered by exactly one message.
				want := []byte(`"density":"` + string(d) + `"`)
				h.Publish(snap)
				for {
					_, m, err := c.ReadMessage()
					if err != nil {
						b.Fatal(err)
					}
					if bytes.Contains(m, want) {
						break
					}
				}
				var size, onWire int
				b.ReportAllocs()
				for b.Loop() {
					before := wire.read.Load()
					s := *snap
					h.Publish(&s)
					_, m, err := c.ReadMessage()
					if err != nil {
						b.Fatal(err)
					}
					size, onWire = len(m), int(wire.read.Load()-before)
				}
				b.ReportMetric(float64(onWire), "wire-bytes/update")
				b.ReportMetric(float64(size), "bytes/update")
			})
		}
	}
}

// BenchmarkHubEncode measures the hub goroutine's own work per update and
// density in use: converting the snapshot to tiles and encoding it once for
// every browser at that density (compression then happens once, in the
// first writer that sends it).
func BenchmarkHubEncode(b *testing.B) {
	for _, n := range []int{384, 1024} {
		snap := syntheticSnapshot(n, 1)
		for _, d := range []Density{Large, Medium, Compact} {
			b.Run(fmt.Sprintf("units=%d/density=%s", n, d), func(b *testing.B) {
				b.ReportAllocs()
				for b.Loop() {
					if encodeSnapshot(snap, d) == nil {
						b.Fatal("not encoded")
					}
				}
			})
		}
	}
}
