// Package natstest runs an embedded NATS server for tests: on a random
// loopback port, with or without JetStream, and restartable on the same
// port (and the same JetStream store), so that clients reconnect to it as
// they would to a real server coming back.
//
// A Server made by Start belongs to one test; it is shut down and its store
// removed when the test ends. New makes one for an Example, which has no
// test: its owner calls Close. Its methods may be called from any
// goroutine.
package natstest

import (
	"errors"
	"fmt"
	"net"
	"os"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nats.go"
)

// readyTimeout bounds the wait for a starting server.
const readyTimeout = 10 * time.Second

// Options configure a Server.
type Options struct {
	// JetStream enables JetStream, storing into a directory of the test.
	JetStream bool
}

// Server is an embedded NATS server for one test.
type Server struct {
	t     testing.TB // nil for a Server made by New
	opt   Options
	store string
	temp  bool // store is a directory of New's, removed by Close

	mu   sync.Mutex
	port int // server.RANDOM_PORT until the first start
	srv  *server.Server
}

// Start starts a server on a random loopback port.
func Start(t testing.TB, opt Options) *Server {
	t.Helper()
	s := &Server{t: t, opt: opt, port: server.RANDOM_PORT}
	if opt.JetStream {
		s.store = t.TempDir()
	}
	if err := s.start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(s.Stop)
	return s
}

// New starts a server outside a test (for an Example); Close stops it and
// removes its store.
func New(opt Options) (*Server, error) {
	s := &Server{opt: opt, port: server.RANDOM_PORT}
	if opt.JetStream {
		dir, err := os.MkdirTemp("", "natstest-")
		if err != nil {
			return nil, fmt.Errorf("natstest: %w", err)
		}
		s.store, s.temp = dir, true
	}
	if err := s.start(); err != nil {
		s.Close()
		return nil, err
	}
	return s, nil
}

// Close stops the server and removes the store of a Server made by New.
func (s *Server) Close() {
	s.Stop()
	if s.temp {
		_ = os.RemoveAll(s.store)
	}
}

func (s *Server) start() error {
	s.mu.Lock()
	defer s.mu.Unlock()
	srv, err := server.NewServer(&server.Options{
		Host: "127.0.0.1", Port: s.port, NoLog: true, NoSigs: true,
		JetStream: s.opt.JetStream, StoreDir: s.store,
	})
	if err != nil {
		return fmt.Errorf("natstest: %w", err)
	}
	go srv.Start()
	if !srv.ReadyForConnections(readyTimeout) {
		srv.Shutdown()
		return fmt.Errorf("natstest: server not ready after %v", readyTimeout)
	}
	if s.opt.JetStream && !srv.JetStreamEnabled() {
		srv.Shutdown()
		return errors.New("natstest: server started without JetStream")
	}
	addr, ok := srv.Addr().(*net.TCPAddr)
	if !ok {
		srv.Shutdown()
		return fmt.Errorf("natstest: server listens on %v, not TCP", srv.Addr())
	}
	s.srv, s.port = srv, addr.Port
	return nil
}

// URL is the server's client URL; it stays the same across restarts.
func (s *Server) URL() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return fmt.Sprintf("nats://127.0.0.1:%d", s.port)
}

// NATS is the running nats-server (nil while stopped).
func (s *Server) NATS() *server.Server {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.srv
}

// Connect opens a client connection, closed when the test ends. The
// default options reconnect forever, every 50 ms, so that a client lives
// through Restart.
func (s *Server) Connect(t testing.TB, opts ...nats.Option) *nats.Conn {
	t.Helper()
	all := append([]nats.Option{nats.MaxReconnects(-1), nats.ReconnectWait(50 * time.Millisecond)}, opts...)
	nc, err := nats.Connect(s.URL(), all...)
	if err != nil {
		t.Fatalf("natstest: %v", err)
	}
	t.Cleanup(nc.Close)
	return nc
}

// Stop shuts the server down and waits for it; it may be called more than
// once.
func (s *Server) Stop() {
	s.mu.Lock()
	srv := s.srv
	s.srv = nil
	s.mu.Unlock()
	if srv != nil {
		srv.Shutdown()
		srv.WaitForShutdown()
	}
}

// Restart stops the server (unless Stop already did) and starts a new one
// on the same port and JetStream store. A failure ends the test (panics
// for a Server made by New).
func (s *Server) Restart() {
	if s.t != nil {
		s.t.Helper()
	}
	s.Stop()
	if err := s.start(); err != nil {
		if s.t == nil {
			panic(err)
		}
		s.t.Fatal(err)
	}
}
