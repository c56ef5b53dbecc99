package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"math"
	"strconv"
	"strings"
	"sync"
	"time"

	"github.com/nats-io/nats.go"

	"livefield/online"
	"livefield/replay"
	"livefield/replay/session"
	"livefield/stream/ingest"
	"livefield/stream/wire"
)

// fileArg parses args with one positional FILE, before or after the flags.
func fileArg(fs *flag.FlagSet, args []string) (string, error) {
	var file string
	if len(args) > 0 && !strings.HasPrefix(args[0], "-") {
		file, args = args[0], args[1:]
	}
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return "", err
		}
		return "", errUsage
	}
	rest := fs.Args()
	if file == "" && len(rest) > 0 {
		file, rest = rest[0], rest[1:]
	}
	if len(rest) > 0 {
		fmt.Fprintf(fs.Output(), "livefield %s: unexpected argument %q\n", fs.Name(), rest[0])
		fs.Usage()
		return "", errUsage
	}
	if file == "" {
		fmt.Fprintf(fs.Output(), "livefield %s: the session FILE is missing\n", fs.Name())
		fs.Usage()
		return "", errUsage
	}
	return file, nil
}

// pacing holds the --speed and --from flags of replay and practice.
type pacing struct {
	speedText, fromText string
	speed               float64
	from                time.Duration
}

func (p *pacing) add(fs *flag.FlagSet, speedHelp string) {
	fs.StringVar(&p.speedText, "speed", "1", speedHelp)
	fs.StringVar(&p.fromText, "from", "", "start this far into the session (seconds after its first message, or a duration); the running block's start is kept")
}

// check parses the flags' text.
func (p *pacing) check() (err error) {
	if p.speed, err = parseSpeed(p.speedText); err != nil {
		return err
	}
	p.from, err = parseSeconds("--from", p.fromText)
	return err
}

// parseSpeed reads "max" (0: full speed) or a positive factor.
func parseSpeed(s string) (float64, error) {
	if s == "max" {
		return 0, nil
	}
	v, err := strconv.ParseFloat(s, 64)
	if err != nil || !(v > 0) || math.IsInf(v, 0) {
		return 0, fmt.Errorf("--speed %q: give a positive factor (1 is real time) or max", s)
	}
	return v, nil
}

// parseSeconds reads a duration ("90s", "1m30s") or plain seconds ("90").
func parseSeconds(flagName, s string) (time.Duration, error) {
	if s == "" {
		return 0, nil
	}
	if v, err := strconv.ParseFloat(s, 64); err == nil && v >= 0 && !math.IsInf(v, 0) {
		return time.Duration(v * float64(time.Second)), nil
	}
	d, err := time.ParseDuration(s)
	if err != nil || d < 0 {
		return 0, fmt.Errorf("%s %q: give seconds (90) or a duration (1m30s)", flagName, s)
	}
	return d, nil
}

// openSession opens a session file and prints what it holds.
func openSession(path string, stdout io.Writer) (*session.File, string, error) {
	f, err := session.Open(path)
	if err != nil {
		return nil, "", err
	}
	h := f.Header()
	prefix := h.Prefix
	if prefix == "" {
		prefix = wire.Prefix(h.Rig)
	}
	fmt.Fprintf(stdout, "livefield: session %s: rig %q (%s), recorded %s\n", path, h.Rig, prefix, h.Created.Format(time.RFC3339))
	return f, prefix, nil
}

// damageLogger prints each damaged span of a session file.
func damageLogger(stderr io.Writer) func(*session.CorruptError) {
	return func(e *session.CorruptError) { fmt.Fprintf(stderr, "livefield: %v\n", e) }
}

// printSummary prints the block summary of a final snapshot.
func printSummary(w io.Writer, s *online.Snapshot) {
	if s == nil {
		fmt.Fprintln(w, "livefield: no estimates (the session has no block)")
		return
	}
	b := s.Summary
	fmt.Fprintf(w, "livefield: %.1f s of data, %d units: %d significant, %d reliable; block rule met: %v\n",
		float64(s.T), b.Units, b.Significant, b.Reliable, b.Ready)
}

func runReplay(ctx context.Context, fs *flag.FlagSet, args []string, stdout, stderr io.Writer) error {
	var pace pacing
	pace.add(fs, "playback speed: 1 is real time, 4 four times faster, max as fast as possible (direct, no NATS)")
	addr := fs.String("http", "", "HTTP listen address of the page (default 127.0.0.1:8080 when timed; none at max speed)")
	var nf natsFlags
	nf.add(fs, "publish into this NATS server instead of an embedded one (the page is then served by livefield serve)")
	rig := fs.String("rig", "", "publish under livefield.<rig> instead of the recorded prefix")
	stimuli := fs.String("stimuli", ".", "directory of movie stimulus files")
	file, err := fileArg(fs, args)
	if err != nil {
		return err
	}
	if err := pace.check(); err != nil {
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
	r, err := ingest.Start(ctx, srv.sub, ingest.Options{Prefix: prefix, StimuliDir: stimuli, Logger: log})
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
			waitProcessed(ctx, r, uint64(st.Records), summaryWait)
			printSummary(stdout, r.Sync())
			fmt.Fprintf(stdout, "livefield: replay finished: %d messages (%.1f s of session); the page stays up until Ctrl-C\n", st.Records, st.Span.Seconds())
		}
	}()
	defer wg.Wait()
	defer cancel()
	fmt.Fprintf(stdout, "livefield: replaying at %gx through an embedded NATS server\nlivefield: open http://%s/  (Ctrl-C stops)\n", play.Speed, ln.Addr())
	return serveHTTP(ctx, ln, r, "", stdout)
}

// waitProcessed waits until the ingest has handled n messages, ctx ends
// or timeout passes, and reports whether it got there.
// (A candidate for a method of ingest.Rig that wakes on progress instead
// of polling.)
func waitProcessed(ctx context.Context, r *ingest.Rig, n uint64, timeout time.Duration) bool {
	const poll = 10 * time.Millisecond
	deadline := time.Now().Add(timeout)
	for r.Counters().Processed < n {
		if ctx.Err() != nil || time.Now().After(deadline) {
			return false
		}
		t := time.NewTimer(poll)
		select {
		case <-ctx.Done():
		case <-t.C:
		}
		t.Stop()
	}
	return true
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
func progressPrinter(w io.Writer) func(replay.FeedStats) {
	return func(s replay.FeedStats) {
		fmt.Fprintf(w, "livefield: %d messages, %d blocks, %d bins, stream at %.1f s\n", s.Messages, s.Blocks, s.Bins, s.Stream)
	}
}

// replayFullSpeed feeds the session to the mapper at full speed, printing
// progress each second, and serves the page afterwards when addr is set.
// The estimates are updated once, at the end of each block (replay.FinalOnly).
func replayFullSpeed(ctx context.Context, f *session.File, play replay.PlayOptions, addr, stimuli string, stdout, stderr io.Writer) error {
	feeder, err := replay.NewFeeder(replay.FeedOptions{StimuliDir: stimuli, UpdateEvery: replay.FinalOnly})
	if err != nil {
		return err
	}
	start := time.Now()
	st, err := feeder.FeedSession(ctx, f.Reader, replay.PassOptions{From: play.From, OnDamage: play.OnDamage, Progress: progressPrinter(stdout)})
	if err != nil {
		return err
	}
	snap := feeder.Finish()
	el := time.Since(start).Seconds()
	fs := feeder.Stats()
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
	return serveHTTP(ctx, ln, feeder, "", stdout)
}
