package main

import (
	"errors"
	"fmt"
	"os"
	"time"

	"github.com/nats-io/nats-server/v2/server"
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
