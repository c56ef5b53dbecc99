package display

import (
	"context"
	"crypto/subtle"
	"encoding/json"
	"net/http"
	"net/url"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"github.com/gorilla/websocket"

	"livefield/online"
)

// Timing and size limits of the websocket connections.
const (
	// writeWait is the time allowed to write one message to a browser.
	writeWait = 10 * time.Second
	// pongWait is the time allowed between two pongs from a browser.
	pongWait = 60 * time.Second
	// pingPeriod is how often the server pings; shorter than pongWait so a
	// pong can arrive before the read deadline.
	pingPeriod = pongWait * 9 / 10
	// MaxClientMessage bounds a message from a browser (a view request).
	MaxClientMessage = 4 << 10
	// MaxView bounds the number of units a browser may have in view; each
	// one costs a full estimate per update.
	MaxView = 64
)

// Message types sent to the browser. Each message is one JSON object with a
// "type" field.
const (
	typeSnapshot = "snapshot" // {"type":"snapshot","snapshot":{…tileSnapshot}}, at the client's density
	typeUnit     = "unit"     // {"type":"unit","block":…,"t":…,"unit":{…online.UnitDetail}}
)

// HubStats counts what a Hub has done.
type HubStats struct {
	Clients int    // connected browsers
	Updates uint64 // snapshots sent out
	Dropped uint64 // updates replaced by a newer one before a slow browser took them
	// Last is the last snapshot sent out (nil before the first).
	Last *online.Snapshot
}

// Hub fans the latest snapshot out to the connected browsers. One goroutine
// (Run) owns the set of clients; Publish, ServeHTTP and Stats may be called
// from any goroutine.
type Hub struct {
	token    string
	upgrader websocket.Upgrader

	register   chan *client
	unregister chan *client
	views      chan *client
	wake       chan struct{} // capacity 1: a new snapshot is waiting in next
	next       atomic.Pointer[online.Snapshot]
	inView     atomic.Pointer[[]string] // units whose details some browser shows
	done       chan struct{}            // closed when Run returns

	mu    sync.Mutex // guards stats
	stats HubStats
	wg    sync.WaitGroup // client goroutines
}

// NewHub returns a hub; token, when not empty, is required of every
// websocket (as ?token= or the X-Livefield-Token header) and then also lets
// a page from another origin connect.
func NewHub(token string) *Hub {
	h := &Hub{
		token:      token,
		register:   make(chan *client),
		unregister: make(chan *client),
		views:      make(chan *client),
		wake:       make(chan struct{}, 1),
		done:       make(chan struct{}),
	}
	h.upgrader = websocket.Upgrader{
		ReadBufferSize:  1024,
		WriteBufferSize: 16 << 10,
		CheckOrigin:     h.checkOrigin,
		// Browsers offer permessage-deflate (RFC 7692); the repeated keys
		// and small integers of the tiles compress several times over, and
		// a prepared message is compressed once for all browsers.
		EnableCompression: true,
	}
	return h
}

// Publish hands a new snapshot to the hub. It never blocks: when the hub is
// still busy with an earlier one, only the latest is kept.
func (h *Hub) Publish(s *online.Snapshot) {
	if s == nil {
		return
	}
	h.next.Store(s)
	select {
	case h.wake <- struct{}{}:
	default:
	}
}

// InView returns the ids of the units that the connected browsers have in
// view (whose full estimates they receive), without repeats. A source that
// gathers details from elsewhere (the merged view of a rig's shards) fetches
// those. Safe from any goroutine.
func (h *Hub) InView() []string {
	if p := h.inView.Load(); p != nil {
		return *p
	}
	return nil
}

// noteViews records the union of the clients' views for InView.
func (h *Hub) noteViews(clients map[*client]bool) {
	seen := map[string]bool{}
	ids := []string{}
	for c := range clients {
		view, _ := c.wants()
		for _, id := range view {
			if !seen[id] {
				seen[id] = true
				ids = append(ids, id)
			}
		}
	}
	h.inView.Store(&ids)
}

// Stats returns the counters.
func (h *Hub) Stats() HubStats {
	h.mu.Lock()
	defer h.mu.Unlock()
	return h.stats
}

// Run owns the client set until ctx is cancelled, then closes every
// connection, waits for their goroutines and returns. Run is called once.
func (h *Hub) Run(ctx context.Context) {
	clients := map[*client]bool{}
	var cur *online.Snapshot
	tiles := map[Density]*websocket.PreparedMessage{} // snapshot messages of cur, encoded once per density in use
	units := map[string]*websocket.PreparedMessage{}  // detail messages of cur, encoded once
	defer func() {
		close(h.done)
		for c := range clients {
			c.stop()
		}
		h.wg.Wait()
	}()
	send := func(c *client) {
		if cur == nil {
			return
		}
		view, density := c.wants()
		m, ok := tiles[density]
		if !ok {
			m = encodeSnapshot(cur, density)
			tiles[density] = m // nil for a snapshot that cannot be encoded: not retried
		}
		if m == nil {
			return
		}
		b := &batch{msgs: []*websocket.PreparedMessage{m}}
		for _, id := range view {
			m, ok := units[id]
			if !ok {
				m = encodeUnit(cur, id)
				units[id] = m // nil for an unknown unit: not retried
			}
			if m != nil {
				b.msgs = append(b.msgs, m)
			}
		}
		if c.offer(b) {
			h.count(func(s *HubStats) { s.Dropped++ })
		}
	}
	for {
		select {
		case <-ctx.Done():
			return
		case c := <-h.register:
			clients[c] = true
			h.count(func(s *HubStats) { s.Clients = len(clients) })
			h.noteViews(clients)
			send(c)
		case c := <-h.unregister:
			if clients[c] {
				delete(clients, c)
				c.stop()
				h.count(func(s *HubStats) { s.Clients = len(clients) })
				h.noteViews(clients)
			}
		case c := <-h.views:
			if clients[c] {
				h.noteViews(clients)
				send(c)
			}
		case <-h.wake:
			s := h.next.Load()
			if s == cur {
				continue
			}
			cur = s
			clear(tiles)
			clear(units)
			for c := range clients {
				send(c)
			}
			h.count(func(st *HubStats) { st.Updates++; st.Last = s })
		}
	}
}

func (h *Hub) count(f func(*HubStats)) {
	h.mu.Lock()
	f(&h.stats)
	h.mu.Unlock()
}

func prepare(v any) (*websocket.PreparedMessage, error) {
	b, err := json.Marshal(v)
	if err != nil {
		return nil, err
	}
	return websocket.NewPreparedMessage(websocket.TextMessage, b)
}

func encodeSnapshot(s *online.Snapshot, d Density) *websocket.PreparedMessage {
	b, err := encodeTiles(s, d)
	if err != nil {
		return nil
	}
	m, err := websocket.NewPreparedMessage(websocket.TextMessage, b)
	if err != nil {
		return nil
	}
	return m
}

func encodeUnit(s *online.Snapshot, id string) *websocket.PreparedMessage {
	d, ok := s.Detail(id)
	if !ok {
		return nil
	}
	m, err := prepare(map[string]any{"type": typeUnit, "block": s.Block, "t": s.T, "unit": d})
	if err != nil {
		return nil
	}
	return m
}

// checkOrigin accepts a page served by this host, or any page that presents
// the token (when a token is set, ServeHTTP has already required it).
func (h *Hub) checkOrigin(r *http.Request) bool {
	if h.token != "" && tokenOK(r, h.token) {
		return true
	}
	origin := r.Header.Get("Origin")
	if origin == "" {
		return true // not a browser: browsers always send Origin on websockets
	}
	u, err := url.Parse(origin)
	if err != nil {
		return false
	}
	return strings.EqualFold(u.Host, r.Host)
}

// tokenOK reports whether the request presents token, in constant time.
func tokenOK(r *http.Request, token string) bool {
	got := r.Header.Get(TokenHeader)
	if got == "" {
		got = r.URL.Query().Get("token")
	}
	return subtle.ConstantTimeCompare([]byte(got), []byte(token)) == 1
}

// ServeHTTP upgrades the request to a websocket and serves it until the
// browser leaves or the hub stops. The query parameter density sets the
// density of the tiles from the first update on (default Large).
func (h *Hub) ServeHTTP(w http.ResponseWriter, r *http.Request) {
	select {
	case <-h.done:
		http.Error(w, "display: shutting down", http.StatusServiceUnavailable)
		return
	default:
	}
	if h.token != "" && !tokenOK(r, h.token) {
		fail(w, http.StatusUnauthorized, "display: missing or wrong token (header %s or ?token=)", TokenHeader)
		return
	}
	conn, err := h.upgrader.Upgrade(w, r, nil)
	if err != nil {
		return // the upgrader has written the error response
	}
	c := &client{conn: conn, wake: make(chan struct{}, 1), quit: make(chan struct{}), density: Large}
	if d, ok := parseDensity(r.URL.Query().Get("density")); ok {
		c.density = d // the first update at the page's density already
	}
	h.wg.Add(2) // before register, so Run's Wait cannot start in between
	select {
	case h.register <- c:
	case <-h.done:
		h.wg.Add(-2)
		conn.Close()
		return
	}
	go c.writeLoop(h)
	go c.readLoop(h)
}

// batch is what one browser receives for one snapshot: the tiles at its
// density and the details of the units it has in view, written in order.
type batch struct {
	msgs []*websocket.PreparedMessage
}

// client is one browser. The hub goroutine offers batches; the writer takes
// them; the reader updates the view and the density.
type client struct {
	conn *websocket.Conn
	wake chan struct{} // capacity 1
	quit chan struct{} // closed by stop
	once sync.Once

	mu      sync.Mutex
	pending *batch   // latest batch not yet taken by the writer
	view    []string // unit ids in view
	density Density  // of the tiles; Large until the browser says otherwise
}

// offer replaces the pending batch; it reports whether an untaken one was
// dropped. It never blocks.
func (c *client) offer(b *batch) (dropped bool) {
	c.mu.Lock()
	dropped = c.pending != nil
	c.pending = b
	c.mu.Unlock()
	select {
	case c.wake <- struct{}{}:
	default:
	}
	return dropped
}

func (c *client) take() *batch {
	c.mu.Lock()
	defer c.mu.Unlock()
	b := c.pending
	c.pending = nil
	return b
}

// wants returns the units in view and the density of the tiles.
func (c *client) wants() ([]string, Density) {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.view, c.density
}

func (c *client) stop() { c.once.Do(func() { close(c.quit) }) }

// leave unregisters c unless the hub has stopped.
func (c *client) leave(h *Hub) {
	select {
	case h.unregister <- c:
	case <-h.done:
	}
}

func (c *client) writeLoop(h *Hub) {
	ticker := time.NewTicker(pingPeriod)
	defer func() {
		ticker.Stop()
		c.conn.Close() // ends the reader too
		c.leave(h)
		h.wg.Done()
	}()
	for {
		select {
		case <-c.quit:
			c.conn.SetWriteDeadline(time.Now().Add(writeWait))
			c.conn.WriteMessage(websocket.CloseMessage,
				websocket.FormatCloseMessage(websocket.CloseGoingAway, "display: server stopping"))
			return
		case <-c.wake:
			b := c.take()
			if b == nil {
				continue
			}
			for _, m := range b.msgs {
				if err := c.conn.SetWriteDeadline(time.Now().Add(writeWait)); err != nil {
					return
				}
				if err := c.conn.WritePreparedMessage(m); err != nil {
					return
				}
			}
		case <-ticker.C:
			if err := c.conn.SetWriteDeadline(time.Now().Add(writeWait)); err != nil {
				return
			}
			if err := c.conn.WriteMessage(websocket.PingMessage, nil); err != nil {
				return
			}
		}
	}
}

// viewRequest is the one message a browser sends: the units whose full
// estimates it wants with every update, and the density of its tiles (an
// absent or unknown density leaves the density as it was).
type viewRequest struct {
	View    []string `json:"view"`
	Density string   `json:"density,omitempty"`
}

func (c *client) readLoop(h *Hub) {
	defer func() {
		c.conn.Close()
		c.stop() // ends the writer
		h.wg.Done()
	}()
	c.conn.SetReadLimit(MaxClientMessage)
	c.conn.SetReadDeadline(time.Now().Add(pongWait))
	c.conn.SetPongHandler(func(string) error {
		return c.conn.SetReadDeadline(time.Now().Add(pongWait))
	})
	for {
		_, b, err := c.conn.ReadMessage()
		if err != nil {
			return // includes a message over the read limit
		}
		var req viewRequest
		if json.Unmarshal(b, &req) != nil {
			continue // not a view list: ignored
		}
		view := make([]string, 0, min(len(req.View), MaxView))
		for _, id := range req.View {
			if len(view) == MaxView {
				break
			}
			if id != "" && len(id) <= MaxIDLength {
				view = append(view, id)
			}
		}
		c.mu.Lock()
		c.view = view
		if d, ok := parseDensity(req.Density); ok {
			c.density = d
		}
		c.mu.Unlock()
		select {
		case h.views <- c:
		case <-c.quit:
			return
		case <-h.done:
			return
		}
	}
}
