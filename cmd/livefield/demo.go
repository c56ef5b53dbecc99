package main

import (
	"context"
	"flag"
	"fmt"
	"io"
	"livefield/online"
	"log/slog"
	"sync"
	"time"

	"livefield/display"
	"livefield/stream/ingest"
	"livefield/stream/wire"
)

// The demo's units fire faster and more sharply than simulate's defaults, so
// that most fields become reliable within a few minutes of watching.
const (
	demoRate = 16  // Hz
	demoGain = 1.5 // slope of the exponential nonlinearity
)

const demoRig = "demo"

func runDemo(ctx context.Context, fs *flag.FlagSet, args []string, stdout, stderr io.Writer) error {
	addr := fs.String("http", "127.0.0.1:8080", "HTTP listen address")
	seed := fs.Uint64("seed", 1, "seed of the synthetic rig")
	units := fs.Int("units", 48, "number of synthetic units (on 32 channels)")
	var strength synthSettings
	addSynthFlags(fs, &strength, demoRate, demoGain)
	length := fs.Duration("block-length", 15*time.Minute, "length of each synthetic block; blocks follow each other until Ctrl-C")
	if err := parse(fs, args); err != nil {
		return err
	}
	if *units <= 0 {
		return fmt.Errorf("--units %d: must be positive", *units)
	}
	if *length <= 0 {
		return fmt.Errorf("--block-length %v: must be positive", *length)
	}
	log := slog.New(slog.NewTextHandler(stderr, nil))
	ln, err := listen(*addr)
	if err != nil {
		return err
	}
	defer ln.Close()

	srv, err := startEmbeddedRig("demo", log)
	if err != nil {
		return err
	}
	defer srv.close()
	fmt.Fprintf(stdout, "livefield: NATS server at %s (JetStream store %s)\n", srv.url(), srv.store)
	sub, pub := srv.sub, srv.pub

	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	prefix := wire.Prefix(demoRig)
	// The embedded server has JetStream, so the demo maps durably, as serve
	// does on such a server.
	updates := display.NewUpdates()
	r, err := ingest.Start(ctx, sub, ingest.Options{Prefix: prefix, Logger: log, Durable: true, OnUpdate: updates.Notify,
		// The demo's 48 units afford the larger smooth-local window, which
		// holds nearly all of each synthetic field: READY comes in about a
		// quarter of the ridge's time (README, "Smooth-local estimate").
		Prior: demoPrior})
	if err != nil {
		return err
	}
	defer r.Close()
	if h := r.Health(); h.Durable {
		fmt.Fprintf(stdout, "livefield: durable: JetStream stream %s, consumer %s\n", h.Stream, h.Consumer)
	}

	var wg sync.WaitGroup
	wg.Add(1)
	go func() {
		defer wg.Done()
		for n := 1; ctx.Err() == nil; n++ {
			s := synthSettings{seed: *seed + uint64(n-1), units: *units, speed: 1, duration: *length, block: fmt.Sprintf("demo-%d", n), rate: strength.rate, gain: strength.gain}
			if err := publishSynth(ctx, pub, prefix, s); err != nil && ctx.Err() == nil {
				log.Error("demo: synthetic rig stopped", "err", err)
				cancel()
				return
			}
		}
	}()
	defer wg.Wait()
	defer cancel()

	fmt.Fprintf(stdout, "livefield: synthetic rig %q: 16×16 binary noise at 60 Hz, %d units on 32 channels\n", demoRig, *units)
	fmt.Fprintf(stdout, "livefield: open http://%s/  (Ctrl-C stops)\n", ln.Addr())
	err = serveHTTP(ctx, ln, r, updates, "", stdout)
	fmt.Fprintln(stdout, "livefield: stopping")
	return err
}

// demoPrior is the demo's smooth-local window: 9×9 pixels × 8 lags.
var demoPrior = online.PriorOptions{WindowPixels: 9, WindowLags: 8}
