package main

import (
	"context"
	"crypto/rand"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"net"
	"net/http"
	"strconv"
	"sync"
	"syscall"
	"time"

	"livefield/display"
	"livefield/stream/ingest"
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

// webToken returns the token that guards the commands and exports of a page
// served on ln: the given one, or, when ln listens beyond loopback and none
// was given, a new random one, printed on out with the URL that carries it.
func webToken(ln net.Listener, given string, out io.Writer) (string, error) {
	a, tcp := ln.Addr().(*net.TCPAddr)
	if given != "" || (tcp && a.IP.IsLoopback()) {
		return given, nil
	}
	b := make([]byte, 16)
	if _, err := rand.Read(b); err != nil {
		return "", fmt.Errorf("http: making a token: %w", err)
	}
	token := hex.EncodeToString(b)
	port := "PORT"
	if tcp {
		port = strconv.Itoa(a.Port)
	}
	fmt.Fprintf(out, "livefield: %s listens beyond loopback, so controls and exports need this token\nlivefield: open http://<this machine>:%s/?token=%s\n", ln.Addr(), port, token)
	return token, nil
}

// route is a handler served beside the page (the practice endpoints).
type route struct {
	pattern string
	handler http.Handler
}

// serveHTTP serves the page, websocket, JSON API and exports of src, and
// the extra routes, on ln until ctx is done, then shuts down gracefully.
// src is a live rig or a replay's feeder (the ingest's counters).
// updates, rung by src's update hook, pushes each snapshot to the browsers
// as it is published (nil: the page polls src). token guards the commands
// and exports; beyond loopback one is made up when none is given
// (webToken).
func serveHTTP(ctx context.Context, ln net.Listener, src display.Source[ingest.Health], updates *display.Updates, token string, out io.Writer, extra ...route) error {
	token, err := webToken(ln, token, out)
	if err != nil {
		return err
	}
	web := display.NewServer(display.AnyHealth(src), display.Options{Token: token, Updates: updates})
	var h http.Handler = web
	if len(extra) > 0 {
		mux := http.NewServeMux()
		for _, r := range extra {
			mux.Handle(r.pattern, r.handler)
		}
		mux.Handle("/", web)
		h = mux
	}
	srv := display.NewHTTPServer("", h) // read, write and idle timeouts set there
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
	err = srv.Shutdown(sctx)
	<-errc
	return err
}

// serveHandler serves h on ln until ctx is done, then shuts down gracefully.
func serveHandler(ctx context.Context, ln net.Listener, h http.Handler) error {
	srv := display.NewHTTPServer("", h)
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
