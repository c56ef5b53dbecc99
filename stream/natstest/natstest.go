// Package natstest runs an embedded NATS server for tests: on a random
// loopback port, with or without JetStream, and restartable on the same
// port (and the same JetStream store), so that clients reconnect to it as
// they would to a real server coming back.
//
// A Server belongs to one test; it is shut down and its store removed when
// the test ends. Its methods may be called from any goroutine.
package natstest

import (
	"fmt"
	"net"
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
	t     testing.TB
	opt   Options
	store string

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
	s.start()
	t.Cleanup(s.Stop)
	return s
}

func (s *Server) start() {
	s.t.Helper()
	s.mu.Lock()
	defer s.mu.Unlock()
	srv, err := server.NewServer(&server.Options{
		Host: "127.0.0.1", Port: s.port, NoLog: true, NoSigs: true,
		JetStream: s.opt.JetStream, StoreDir: s.store,
	})
	if err != nil {
		s.t.Fatalf("natstest: %v", err)
	}
	go srv.Start()
	if !srv.ReadyForConnections(readyTimeout) {
		srv.Shutdown()
		s.t.Fatalf("natstest: server not ready after %v", readyTimeout)
	}
	s.srv = srv
	addr, ok := srv.Addr().(*net.TCPAddr)
	if !ok {
		srv.Shutdown()
		s.t.Fatalf("natstest: server listens on %v, not TCP", srv.Addr())
	}
	s.port = addr.Port
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

// Restart stops the server and starts a new one on the same port and
// JetStream store.
func (s *Server) Restart() {
	s.t.Helper()
	s.Stop()
	s.start()
}
