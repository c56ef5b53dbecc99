package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"math"
	"sync"
	"time"

	"github.com/nats-io/nats.go"

	"livefield/display"
	"livefield/replay"
	"livefield/replay/session"
	"livefield/stream/ingest"
)

func runReplay(ctx context.Context, fs *flag.FlagSet, args []string, stdout, stderr io.Writer) error {
	var pace pacing
	pace.add(fs, "playback speed: 1 is real time, 4 four times faster, max as fast as possible (direct, no NATS)")
	addr := fs.String("http", "", "HTTP listen address of the page (default 127.0.0.1:8080 when timed; none at max speed)")
	var nf natsFlags
	nf.add(fs, "publish into this NATS server instead of an embedded one (the page is then served by livefield serve)")
	rig := fs.String("rig", "", "publish under livefield.<rig> instead of the recorded prefix")
	stimuli := fs.String("stimuli", ".", "directory of movie stimulus files")
	file, err := pace.fileArg(fs, args)
	if err != nil {
		return err
	}
	f, prefix, err := openSession(file, stdout)
	if err != nil {
		return err
	}
	defer f.Close()
	if *rig != "" {
		if prefix, err = rigPrefix(*rig); err != nil {
			return err
		}
	}
	play := replay.PlayOptions{Speed: pace.speed, From: pace.from, OnDamage: damageLogger(stderr)}
	switch {
	case pace.speed == 0 && nf.url != "":
		return errors.New("--speed max feeds the mapper directly; drop --nats or give a speed")
	case pace.speed == 0:
		return replayFullSpeed(ctx, f, play, *addr, *stimuli, stdout, stderr)
	case nf.url != "":
		if *addr != "" {
			return errors.New("--http goes with the embedded server; with --nats run livefield serve for the page")
		}
		return replayIntoNATS(ctx, &nf, f, prefix, play, stdout, stderr)
	}
	if *addr == "" {
		*addr = "127.0.0.1:8080"
	}
	return replayWithPage(ctx, f, prefix, play, *addr, *stimuli, stdout, stderr)
}

// replayIntoNATS publishes the session, timed, into the server of nf.
func replayIntoNATS(ctx context.Context, nf *natsFlags, f *session.File, prefix string, play replay.PlayOptions, stdout, stderr io.Writer) error {
	nc, err := nf.dial("livefield replay", slog.New(slog.NewTextHandler(stderr, nil)))
	if err != nil {
		return err
	}
	defer nc.Close()
	fmt.Fprintf(stdout, "livefield: publishing into %s under %s at %gx\n", redact(nf.url), prefix, play.Speed)
	st, err := publishSession(ctx, nc, prefix, f.Reader, play)
	fmt.Fprintf(stdout, "livefield: published %d messages (%.1f s of session)\n", st.Records, st.Span.Seconds())
	return err
}

// summaryWait bounds the wait for the ingest to take the last published
// messages before the summary is printed.
const summaryWait = 5 * time.Second

// replayWithPage publishes the session, timed, through an embedded NATS
// server into the live ingest and serves the page on addr until ctx ends.
func replayWithPage(ctx context.Context, f *session.File, prefix string, play replay.PlayOptions, addr, stimuli string, stdout, stderr io.Writer) error {
	log := slog.New(slog.NewTextHandler(stderr, nil))
	ln, err := listen(addr)
	if err != nil {
		return err
	}
	defer ln.Close()
	srv, err := startEmbeddedRig("replay", log)
	if err != nil {
		return err
	}
	defer srv.close()
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	updates := display.NewUpdates()
	r, err := ingest.Start(ctx, srv.sub, ingest.Options{Prefix: prefix, StimuliDir: stimuli, Logger: log, OnUpdate: updates.Notify})
	if err != nil {
		return err
	}
	defer r.Close()
	var wg sync.WaitGroup
	wg.Add(1)
	go func() {
		defer wg.Done()
		st, err := publishSession(ctx, srv.pub, prefix, f.Reader, play)
		if err != nil && ctx.Err() == nil {
			log.Error("replay stopped", "err", err)
			cancel()
			return
		}
		if ctx.Err() == nil {
			// Let the ingest take the last messages before the summary.
			wctx, cancel := context.WithTimeout(ctx, summaryWait)
			r.WaitProcessed(wctx, uint64(st.Records))
			cancel()
			printSummary(stdout, r.Sync())
			fmt.Fprintf(stdout, "livefield: replay finished: %d messages (%.1f s of session); the page stays up until Ctrl-C\n", st.Records, st.Span.Seconds())
		}
	}()
	defer wg.Wait()
	defer cancel()
	fmt.Fprintf(stdout, "livefield: replaying at %gx through an embedded NATS server\nlivefield: open http://%s/  (Ctrl-C stops)\n", play.Speed, ln.Addr())
	return serveHTTP(ctx, ln, r, updates, "", stdout)
}

// publishSession plays r into nc under prefix.
func publishSession(ctx context.Context, nc *nats.Conn, prefix string, r *session.Reader, play replay.PlayOptions) (replay.PlayStats, error) {
	st, err := replay.Play(ctx, r, play, func(rec session.Record) error {
		return nc.Publish(prefix+"."+rec.Subject, rec.Data)
	})
	if ferr := nc.Flush(); err == nil && ferr != nil {
		err = fmt.Errorf("nats: %w", ferr)
	}
	return st, err
}

// progressPrinter prints the counts of a full-speed pass (replay.PassOptions.Progress).
func progressPrinter(w io.Writer) func(ingest.Health) {
	return func(h ingest.Health) {
		stream := float64(h.StreamTime)
		if math.IsNaN(stream) {
			stream = 0 // no spike or frame yet
		}
		// Bins fed so far: in the estimates or waiting for the next update
		// (a full-speed pass updates only at each block's end).
		fmt.Fprintf(w, "livefield: %d messages, %d blocks, %d bins, stream at %.1f s\n", h.Processed, h.Blocks, h.Bins+h.BinsWaiting, stream)
	}
}

// replayFullSpeed feeds the session to the mapper at full speed, printing
// progress each second, and serves the page afterwards when addr is set.
// The estimates are updated once, at the end of each block (replay.FinalOnly),
// by an estimator beside the decoding (replay.FeedOptions.Pipelined).
func replayFullSpeed(ctx context.Context, f *session.File, play replay.PlayOptions, addr, stimuli string, stdout, stderr io.Writer) error {
	// The page, served after the pass, shows the snapshots of its own
	// commands (a reset, a criterion) as they are published.
	updates := display.NewUpdates()
	feeder, err := replay.NewFeeder(replay.FeedOptions{StimuliDir: stimuli, UpdateEvery: replay.FinalOnly, OnUpdate: updates.Notify, Pipelined: true})
	if err != nil {
		return err
	}
	defer feeder.Close()
	start := time.Now()
	st, err := feeder.FeedSession(ctx, f.Reader, replay.PassOptions{From: play.From, OnDamage: play.OnDamage, Progress: progressPrinter(stdout)})
	if err != nil {
		return err
	}
	snap := feeder.Finish()
	el := time.Since(start).Seconds()
	fs := feeder.Health()
	fmt.Fprintf(stdout, "livefield: replayed %d messages (%.1f s of session) in %.2f s: %.0fx real time; %d blocks, %d bins\n",
		st.Records, st.Span.Seconds(), el, st.Span.Seconds()/math.Max(el, 1e-9), fs.Blocks, fs.Bins)
	for reason, n := range fs.Rejected {
		fmt.Fprintf(stderr, "livefield: %d messages refused (%s)\n", n, reason)
	}
	printSummary(stdout, snap)
	if addr == "" {
		return nil
	}
	ln, err := listen(addr)
	if err != nil {
		return err
	}
	defer ln.Close()
	fmt.Fprintf(stdout, "livefield: open http://%s/  (Ctrl-C stops)\n", ln.Addr())
	return serveHTTP(ctx, ln, feeder, updates, "", stdout)
}
