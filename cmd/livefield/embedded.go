package main

import (
	"errors"
	"fmt"
	"log/slog"
	"os"
	"time"

	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nats.go"
)

// embedded is an in-process NATS server on a random loopback port, with
// JetStream storing into a temporary directory.
type embedded struct {
	srv   *server.Server
	store string
}

func startEmbedded() (*embedded, error) {
	store, err := os.MkdirTemp("", "livefield-nats-")
	if err != nil {
		return nil, fmt.Errorf("embedded nats: %w", err)
	}
	srv, err := server.NewServer(&server.Options{
		Host:      "127.0.0.1",
		Port:      server.RANDOM_PORT,
		NoSigs:    true,
		NoLog:     true,
		JetStream: true,
		StoreDir:  store,
	})
	if err != nil {
		os.RemoveAll(store)
		return nil, fmt.Errorf("embedded nats: %w", err)
	}
	go srv.Start()
	if !srv.ReadyForConnections(10 * time.Second) {
		srv.Shutdown()
		os.RemoveAll(store)
		return nil, errors.New("embedded nats: not ready for connections after 10 s")
	}
	return &embedded{srv: srv, store: store}, nil
}

func (e *embedded) url() string { return e.srv.ClientURL() }

// close shuts the server down, waits for it and removes its store.
func (e *embedded) close() {
	e.srv.Shutdown()
	e.srv.WaitForShutdown()
	os.RemoveAll(e.store)
}

// embeddedRig is an embedded server with two clients: one for the ingest
// and one for whatever publishes as the rig (the synthetic rig or a replay).
type embeddedRig struct {
	*embedded
	sub, pub *nats.Conn
}

// startEmbeddedRig starts the server and connects both clients, named after
// the command.
func startEmbeddedRig(command string, log *slog.Logger) (*embeddedRig, error) {
	srv, err := startEmbedded()
	if err != nil {
		return nil, err
	}
	e := &embeddedRig{embedded: srv}
	if e.sub, err = nats.Connect(srv.url(), connectOptions("livefield "+command+" ingest", log)...); err != nil {
		e.close()
		return nil, fmt.Errorf("embedded nats: %w", err)
	}
	if e.pub, err = nats.Connect(srv.url(), connectOptions("livefield "+command+" rig", log)...); err != nil {
		e.close()
		return nil, fmt.Errorf("embedded nats: %w", err)
	}
	return e, nil
}

// close closes both clients, then the server.
func (e *embeddedRig) close() {
	for _, nc := range []*nats.Conn{e.pub, e.sub} {
		if nc != nil {
			nc.Close()
		}
	}
	e.embedded.close()
}
