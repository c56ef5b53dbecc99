package main

import (
	"context"
	"errors"
	"fmt"
	"net"
	"sync"
	"syscall"
	"time"

	"livefield/display"
)

// shutdownTimeout bounds the wait for open requests at shutdown.
const shutdownTimeout = 5 * time.Second

// listen opens addr, explaining a taken port.
func listen(addr string) (net.Listener, error) {
	ln, err := net.Listen("tcp", addr)
	if err != nil {
		if errors.Is(err, syscall.EADDRINUSE) {
			return nil, fmt.Errorf("--http %s: the address is already in use; pick another with --http, e.g. --http 127.0.0.1:8081", addr)
		}
		return nil, fmt.Errorf("--http %s: %w", addr, err)
	}
	return ln, nil
}

// serveHTTP serves the page, websocket, JSON API and exports of src on ln
// until ctx is done, then shuts down gracefully. token, when set, guards
// the commands and exports.
func serveHTTP(ctx context.Context, ln net.Listener, src display.SnapshotSource, token string) error {
	web := display.NewServer(src, display.Options{Token: token})
	srv := display.NewHTTPServer("", web) // read, write and idle timeouts set there
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	var wg sync.WaitGroup
	wg.Add(1)
	go func() { defer wg.Done(); web.Run(ctx) }()
	defer wg.Wait()
	errc := make(chan error, 1)
	go func() { errc <- srv.Serve(ln) }()
	select {
	case err := <-errc:
		return fmt.Errorf("http: %w", err)
	case <-ctx.Done():
	}
	sctx, stop := context.WithTimeout(context.Background(), shutdownTimeout)
	defer stop()
	err := srv.Shutdown(sctx)
	<-errc
	return err
}
