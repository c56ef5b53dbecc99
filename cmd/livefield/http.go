package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"net"
	"net/http"
	"syscall"
	"time"

	"livefield/display"
)

// HTTP server timeouts (common practice, no source: a slow client cannot
// hold a connection open forever; the JSON responses are small).
const (
	readHeaderTimeout = 5 * time.Second
	readTimeout       = 10 * time.Second
	writeTimeout      = 30 * time.Second
	idleTimeout       = 120 * time.Second
	shutdownTimeout   = 5 * time.Second
)

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

// handler is the whole HTTP surface: the JSON API under /api/.
func handler(src display.SnapshotSource) http.Handler {
	mux := http.NewServeMux()
	mux.Handle("/api/", display.NewAPI(src))
	mux.HandleFunc("GET /{$}", func(w http.ResponseWriter, _ *http.Request) {
		w.Header().Set("Content-Type", "text/plain; charset=utf-8")
		_, _ = io.WriteString(w, "livefield\n\nGET /api/units\nGET /api/units/{id}\nGET /api/health\nPOST /api/reset\nPOST /api/units/{id}/stc\nPOST /api/criterion\n")
	})
	return mux
}

// serveHTTP serves h on ln until ctx is done, then shuts down gracefully.
func serveHTTP(ctx context.Context, ln net.Listener, h http.Handler) error {
	srv := &http.Server{
		Handler:           h,
		ReadHeaderTimeout: readHeaderTimeout,
		ReadTimeout:       readTimeout,
		WriteTimeout:      writeTimeout,
		IdleTimeout:       idleTimeout,
	}
	errc := make(chan error, 1)
	go func() { errc <- srv.Serve(ln) }()
	select {
	case err := <-errc:
		return fmt.Errorf("http: %w", err)
	case <-ctx.Done():
	}
	sctx, cancel := context.WithTimeout(context.Background(), shutdownTimeout)
	defer cancel()
	err := srv.Shutdown(sctx)
	<-errc
	return err
}
