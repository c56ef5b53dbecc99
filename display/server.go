package display

import (
	"context"
	"net/http"
	"sync"
	"time"

	"livefield/online"
)

// TokenHeader carries the access token of the data, the controls and the
// exports; the query parameter "token" is accepted as well.
const TokenHeader = "X-Livefield-Token"

// Options configure a Server.
type Options struct {
	// Token, when not empty, is required by everything that carries
	// estimates or commands: the JSON API (/api/…, reads and controls), the
	// exports (/export/…) and the websocket; only the page shell (/ and
	// /static/…) stays open, and the page takes the token from its own URL.
	// Empty means no token (the default; listen on loopback).
	Token string
	// Updates, when set, is rung by the source's update hook
	// (ingest.Options.OnUpdate, replay.FeedOptions.OnUpdate): the browsers
	// get each new snapshot as soon as it is published, and the source is
	// not polled.
	Updates *Updates
	// Poll is how often a source without Updates is asked for a new
	// snapshot (default 1 s).
	Poll time.Duration
}

// Updates tells a Server that its source has published a new snapshot.
// Notify never blocks and keeps no snapshot: the latest wins, since the
// server reads the source's latest snapshot when it wakes, and several
// notifications before it wakes count as one.
type Updates struct{ c chan struct{} }

// NewUpdates returns an Updates for one Server.
func NewUpdates() *Updates { return &Updates{c: make(chan struct{}, 1)} }

// Notify has the signature of the update hooks, so that it can be given
// as one: OnUpdate: updates.Notify. It may be called from any goroutine.
func (u *Updates) Notify(string, *online.Snapshot, time.Time) {
	select {
	case u.c <- struct{}{}:
	default:
	}
}

// Server mounts the page, the websocket, the JSON API and the exports on one
// handler. ServeHTTP may be called from any goroutine; Run is called once.
type Server struct {
	src   SnapshotSource
	hub   *Hub
	mux   *http.ServeMux
	token string
	wake  <-chan struct{} // the Updates, nil without
	poll  time.Duration
}

// NewServer returns a server reading src.
func NewServer(src SnapshotSource, opt Options) *Server {
	s := &Server{src: src, hub: NewHub(opt.Token), mux: http.NewServeMux(), token: opt.Token, poll: opt.Poll}
	if opt.Updates != nil {
		s.wake = opt.Updates.c
	}
	if s.poll <= 0 {
		s.poll = time.Second
	}
	api := NewAPI(src)
	page := Page()
	s.mux.Handle("GET /{$}", page)
	s.mux.Handle("GET /static/", page)
	s.mux.Handle("GET /ws", s.hub) // the hub asks for the token itself
	s.mux.Handle("/api/", s.guard(api))
	s.mux.Handle("/export/", s.guard(ExportHandler(src)))
	return s
}

// Hub is the server's websocket hub.
func (s *Server) Hub() *Hub { return s.hub }

// ServeHTTP implements http.Handler.
func (s *Server) ServeHTTP(w http.ResponseWriter, r *http.Request) { s.mux.ServeHTTP(w, r) }

// Run hands each new snapshot of the source to the browsers until ctx is
// cancelled; then it closes the websockets and returns. With
// Options.Updates a snapshot goes out when the source rings; without, the
// source is polled every Poll.
func (s *Server) Run(ctx context.Context) {
	var wg sync.WaitGroup
	wg.Add(1)
	go func() { defer wg.Done(); s.hub.Run(ctx) }()
	var tick <-chan time.Time
	if s.wake == nil {
		t := time.NewTicker(s.poll)
		defer t.Stop()
		tick = t.C
	}
	for {
		s.hub.Publish(s.src.Snapshot())
		select {
		case <-ctx.Done():
			wg.Wait()
			return
		case <-s.wake:
		case <-tick:
		}
	}
}

// guard refuses requests without the token, when one is configured.
func (s *Server) guard(h http.Handler) http.Handler {
	if s.token == "" {
		return h
	}
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		if !tokenOK(r, s.token) {
			fail(w, http.StatusUnauthorized, "display: missing or wrong token (header %s or ?token=)", TokenHeader)
			return
		}
		h.ServeHTTP(w, r)
	})
}

// NewHTTPServer returns an http.Server for h on addr with timeouts that
// bound slow or idle clients. The write timeout covers exports; websockets
// clear it on upgrade and keep their own deadlines.
func NewHTTPServer(addr string, h http.Handler) *http.Server {
	return &http.Server{
		Addr:              addr,
		Handler:           h,
		ReadHeaderTimeout: 5 * time.Second,
		ReadTimeout:       15 * time.Second,
		WriteTimeout:      60 * time.Second,
		IdleTimeout:       120 * time.Second,
		MaxHeaderBytes:    16 << 10,
	}
}
