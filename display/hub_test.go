package display

import (
	"context"
	"encoding/json"
	"errors"
	"net"
	"net/http"
	"net/http/httptest"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/gorilla/websocket"

	"livefield/online"
)

// startHub runs a hub behind a test server until the test ends.
func startHub(t testing.TB, token string, ln net.Listener) (*Hub, *httptest.Server) {
	t.Helper()
	h := NewHub(token)
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan struct{})
	go func() { h.Run(ctx); close(done) }()
	srv := httptest.NewUnstartedServer(h)
	if ln != nil {
		srv.Listener.Close()
		srv.Listener = ln
	}
	srv.Start()
	t.Cleanup(func() {
		cancel()
		<-done
		srv.Close()
	})
	return h, srv
}

func wsURL(srv *httptest.Server) string { return "ws" + strings.TrimPrefix(srv.URL, "http") }

func dial(t *testing.T, url string, hdr http.Header) *websocket.Conn {
	t.Helper()
	c, resp, err := websocket.DefaultDialer.Dial(url, hdr)
	if err != nil {
		code := 0
		if resp != nil {
			code = resp.StatusCode
		}
		t.Fatalf("dial %s: %v (status %d)", url, err, code)
	}
	t.Cleanup(func() { c.Close() })
	return c
}

type message struct {
	Type     string             `json:"type"`
	Snapshot *online.Snapshot   `json:"snapshot"`
	Unit     *online.UnitDetail `json:"unit"`
	T        online.Float       `json:"t"`
}

// readInto reads the next websocket message (10 s deadline) into v.
func readInto(t *testing.T, c *websocket.Conn, v any) {
	t.Helper()
	c.SetReadDeadline(time.Now().Add(10 * time.Second))
	_, b, err := c.ReadMessage()
	if err != nil {
		t.Fatalf("read: %v", err)
	}
	if err := json.Unmarshal(b, v); err != nil {
		t.Fatalf("decode %.80q: %v", b, err)
	}
}

func read(t *testing.T, c *websocket.Conn) message {
	t.Helper()
	var m message
	readInto(t, c, &m)
	return m
}

// readSnapshot skips unit messages up to the next snapshot.
func readSnapshot(t *testing.T, c *websocket.Conn) *online.Snapshot {
	t.Helper()
	for {
		if m := read(t, c); m.Type == typeSnapshot {
			return m.Snapshot
		}
	}
}

// waitFor polls cond until it holds or a generous deadline passes.
func waitFor(t *testing.T, what string, cond func() bool) {
	t.Helper()
	deadline := time.Now().Add(10 * time.Second)
	for !cond() {
		if time.Now().After(deadline) {
			t.Fatalf("timed out waiting for %s", what)
		}
		time.Sleep(2 * time.Millisecond)
	}
}

func snapAt(sec float64) *online.Snapshot {
	return &online.Snapshot{Block: "b1", T: online.Float(sec), Shape: [3]int{1, 1, 1}}
}

func TestHubManyClients(t *testing.T) {
	const clients = 20
	h, srv := startHub(t, "", nil)
	conns := make([]*websocket.Conn, clients)
	for i := range conns {
		conns[i] = dial(t, wsURL(srv), nil)
	}
	waitFor(t, "20 clients registered", func() bool { return h.Stats().Clients == clients })
	for round := 1; round <= 3; round++ {
		h.Publish(snapAt(float64(round)))
		var wg sync.WaitGroup
		got := make([]float64, clients)
		for i, c := range conns {
			wg.Add(1)
			go func() {
				defer wg.Done()
				c.SetReadDeadline(time.Now().Add(10 * time.Second))
				_, b, err := c.ReadMessage()
				if err != nil {
					return
				}
				var m message
				if json.Unmarshal(b, &m) == nil && m.Snapshot != nil {
					got[i] = float64(m.Snapshot.T)
				}
			}()
		}
		wg.Wait()
		for i, v := range got {
			if v != float64(round) {
				t.Fatalf("round %d: client %d got t=%v", round, i, v)
			}
		}
	}
	for _, c := range conns[:5] {
		c.Close()
	}
	waitFor(t, "5 clients gone", func() bool { return h.Stats().Clients == clients-5 })
}

func TestHubView(t *testing.T) {
	snap := simulated(t)
	h, srv := startHub(t, "", nil)
	viewer, other := dial(t, wsURL(srv), nil), dial(t, wsURL(srv), nil)
	waitFor(t, "2 clients", func() bool { return h.Stats().Clients == 2 })
	h.Publish(snap)
	readSnapshot(t, viewer)
	readSnapshot(t, other)
	if err := viewer.WriteJSON(viewRequest{View: []string{strongCell.id, "no-such-unit"}}); err != nil {
		t.Fatal(err)
	}
	// The view change is answered at once: the summary, then the one known unit.
	if m := read(t, viewer); m.Type != typeSnapshot {
		t.Fatalf("first message after the view: type %q, want %q", m.Type, typeSnapshot)
	}
	m := read(t, viewer)
	if m.Type != typeUnit || m.Unit == nil || m.Unit.ID != strongCell.id {
		t.Fatalf("want the detail of unit %s, got type %q", strongCell.id, m.Type)
	}
	want := snap.Shape[0] * snap.Shape[1] * snap.Shape[2]
	if len(m.Unit.Ridge) != want || len(m.Unit.STA) != want {
		t.Fatalf("detail has %d ridge and %d STA values, want %d", len(m.Unit.Ridge), len(m.Unit.STA), want)
	}
	// The other browser gets only the summary of the next update.
	next := snapAt(99)
	h.Publish(next)
	if m := read(t, other); m.Type != typeSnapshot || m.Snapshot.T != 99 {
		t.Fatalf("other client: got type %q", m.Type)
	}
	other.SetReadDeadline(time.Now().Add(50 * time.Millisecond))
	if _, b, err := other.ReadMessage(); err == nil {
		t.Fatalf("other client got an extra message %.80s", b)
	}
}

// gatedListener hands out connections whose writes block while the gate is
// closed: a browser tab that stopped reading.
type gatedListener struct {
	net.Listener
	mu   sync.Mutex
	open *sync.Cond
	shut bool
}

func newGatedListener(t *testing.T) *gatedListener {
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	g := &gatedListener{Listener: ln}
	g.open = sync.NewCond(&g.mu)
	return g
}

func (g *gatedListener) set(shut bool) {
	g.mu.Lock()
	g.shut = shut
	g.mu.Unlock()
	g.open.Broadcast()
}

func (g *gatedListener) Accept() (net.Conn, error) {
	c, err := g.Listener.Accept()
	if err != nil {
		return nil, err
	}
	return &gatedConn{Conn: c, g: g}, nil
}

type gatedConn struct {
	net.Conn
	g *gatedListener
}

func (c *gatedConn) Write(b []byte) (int, error) {
	c.g.mu.Lock()
	for c.g.shut {
		c.g.open.Wait()
	}
	c.g.mu.Unlock()
	return c.Conn.Write(b)
}

func TestHubStalledClientCatchesUp(t *testing.T) {
	gate := newGatedListener(t)
	h, srv := startHub(t, "", gate)
	sleepy := dial(t, wsURL(srv), nil)
	awake := dial(t, wsURL(srv), nil)
	waitFor(t, "2 clients", func() bool { return h.Stats().Clients == 2 })
	h.Publish(snapAt(0))
	readSnapshot(t, sleepy)
	readSnapshot(t, awake)

	gate.set(true) // the tab sleeps: the server cannot write to it
	defer gate.set(false)
	const updates = 30
	var last *online.Snapshot
	for i := 1; i <= updates; i++ {
		last = snapAt(float64(i))
		h.Publish(last)
		// The hub never waits for a stalled writer, so every update goes out.
		waitFor(t, "the hub to send out the update", func() bool { return h.Stats().Last == last })
	}
	gate.set(false) // the tab wakes
	var got []float64
	for {
		s := readSnapshot(t, sleepy)
		got = append(got, float64(s.T))
		if float64(s.T) == updates {
			break
		}
	}
	// At most the one write that was under way when the tab fell asleep,
	// then the latest state; never a backlog.
	if len(got) > 2 {
		t.Fatalf("the woken client received %d updates %v, want at most 2 ending at %d", len(got), got, updates)
	}
	if h.Stats().Dropped < updates-3 {
		t.Errorf("dropped %d updates, want at least %d", h.Stats().Dropped, updates-3)
	}
	h.Publish(snapAt(updates + 1))
	if s := readSnapshot(t, sleepy); float64(s.T) != updates+1 {
		t.Fatalf("after catching up got t=%v, want %d", s.T, updates+1)
	}
}

// Without a token, a websocket is accepted from this host's page or from a
// client that is not a browser; with one, the token is required of every
// websocket (issue 12 item 5) and then any origin may present it.
func TestHubOrigin(t *testing.T) {
	const token = "s3cret-token"
	_, open := startHub(t, "", nil)
	_, guarded := startHub(t, token, nil)
	tests := []struct {
		name   string
		srv    *httptest.Server
		origin string // "self" for the server's own host
		query  string
		header string
		want   int // 0 for accepted
	}{
		{"same host", open, "self", "", "", 0},
		{"no origin (not a browser)", open, "", "", "", 0},
		{"other site", open, "http://elsewhere.example", "", "", http.StatusForbidden},
		{"other port", open, "http://127.0.0.1:1", "", "", http.StatusForbidden},
		{"token set: same host without token", guarded, "self", "", "", http.StatusUnauthorized},
		{"token set: no origin without token", guarded, "", "", "", http.StatusUnauthorized},
		{"token set: same host with token", guarded, "self", "?token=" + token, "", 0},
		{"token set: other site with token", guarded, "http://elsewhere.example", "?token=" + token, "", 0},
		{"token set: other site with token header", guarded, "http://elsewhere.example", "", token, 0},
		{"token set: other site with wrong token", guarded, "http://elsewhere.example", "?token=guess", "", http.StatusUnauthorized},
		{"token set: token prefix", guarded, "self", "?token=s3cret", "", http.StatusUnauthorized},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			hdr := http.Header{}
			switch tc.origin {
			case "":
			case "self":
				hdr.Set("Origin", tc.srv.URL)
			default:
				hdr.Set("Origin", tc.origin)
			}
			if tc.header != "" {
				hdr.Set(TokenHeader, tc.header)
			}
			c, resp, err := websocket.DefaultDialer.Dial(wsURL(tc.srv)+tc.query, hdr)
			if c != nil {
				c.Close()
			}
			if tc.want == 0 && err != nil {
				t.Fatalf("refused: %v", err)
			}
			if tc.want != 0 {
				if err == nil {
					t.Fatal("accepted")
				}
				if resp == nil || resp.StatusCode != tc.want {
					t.Fatalf("want %d, got %v", tc.want, resp)
				}
			}
		})
	}
}

func TestHubReadLimit(t *testing.T) {
	h, srv := startHub(t, "", nil)
	c := dial(t, wsURL(srv), nil)
	waitFor(t, "client", func() bool { return h.Stats().Clients == 1 })
	// A view list just under the limit is fine.
	ids := make([]string, 0, 600)
	for len(ids) < 600 {
		ids = append(ids, "u")
	}
	small, _ := json.Marshal(viewRequest{View: ids})
	if len(small) >= MaxClientMessage {
		t.Fatalf("test message of %d bytes is not under the limit", len(small))
	}
	if err := c.WriteMessage(websocket.TextMessage, small); err != nil {
		t.Fatal(err)
	}
	h.Publish(snapAt(1))
	if s := readSnapshot(t, c); s.T != 1 {
		t.Fatalf("got t=%v", s.T)
	}
	big := `{"view":["` + strings.Repeat("x", MaxClientMessage) + `"]}`
	if err := c.WriteMessage(websocket.TextMessage, []byte(big)); err != nil {
		t.Fatal(err)
	}
	// The server drops the connection. It sends close 1009 (message too big)
	// first, but closing a socket with unread input resets it, so the client
	// may see the reset instead.
	waitFor(t, "the client to be dropped", func() bool { return h.Stats().Clients == 0 })
	c.SetReadDeadline(time.Now().Add(10 * time.Second))
	for {
		_, _, err := c.ReadMessage()
		if err == nil {
			continue
		}
		var ce *websocket.CloseError
		if errors.As(err, &ce) && ce.Code != websocket.CloseMessageTooBig {
			t.Fatalf("want close 1009 (message too big), got %v", err)
		}
		break
	}
}

func TestHubShutdown(t *testing.T) {
	h := NewHub("")
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan struct{})
	go func() { h.Run(ctx); close(done) }()
	srv := httptest.NewServer(h)
	defer srv.Close()
	c := dial(t, wsURL(srv), nil)
	waitFor(t, "client", func() bool { return h.Stats().Clients == 1 })
	cancel()
	<-done // Run returns only after the client goroutines have ended
	c.SetReadDeadline(time.Now().Add(10 * time.Second))
	_, _, err := c.ReadMessage()
	if !websocket.IsCloseError(err, websocket.CloseGoingAway) {
		t.Fatalf("want close 1001 (going away), got %v", err)
	}
	resp, err := http.Get(srv.URL)
	if err != nil {
		t.Fatal(err)
	}
	resp.Body.Close()
	if resp.StatusCode != http.StatusServiceUnavailable {
		t.Fatalf("after shutdown: status %d, want 503", resp.StatusCode)
	}
}

// BenchmarkHubUpdate measures one update of the simulated block sent to 20
// browsers, from Publish until every browser has read it.
func BenchmarkHubUpdate(b *testing.B) {
	const clients = 20
	snap := simulated(b)
	h, srv := startHub(b, "", nil)
	got := make(chan int, clients)
	var bytesPer int
	for range clients {
		c, _, err := websocket.DefaultDialer.Dial(wsURL(srv), nil)
		if err != nil {
			b.Fatal(err)
		}
		defer c.Close()
		go func() {
			for {
				_, m, err := c.ReadMessage()
				if err != nil {
					return
				}
				got <- len(m)
			}
		}()
	}
	for h.Stats().Clients < clients {
		time.Sleep(time.Millisecond)
	}
	b.ReportAllocs()
	i := 0
	for b.Loop() {
		i++
		s := *snap
		s.T = online.Float(i)
		h.Publish(&s)
		for range clients {
			bytesPer = <-got
		}
	}
	b.ReportMetric(float64(bytesPer), "bytes/msg")
}
