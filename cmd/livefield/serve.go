package main

import (
	"context"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"math"
	"strconv"
	"time"

	"livefield/display"
	"livefield/online"
	"livefield/stream/binning"
	"livefield/stream/ingest"
	"livefield/stream/shards"
)

func runServe(ctx context.Context, fs *flag.FlagSet, args []string, stdout, stderr io.Writer) error {
	var nf natsFlags
	nf.add(fs, requiredNATS)
	rig := fs.String("rig", "", "rig name (required); subjects are livefield.<rig>.block|frames|spikes|control")
	addr := fs.String("http", "127.0.0.1:8080", "HTTP listen address")
	stimuli := fs.String("stimuli", ".", "directory of movie stimulus files")
	grace := fs.Duration("grace", time.Duration(binning.DefaultGrace*float64(time.Second)), "how long a bin waits for late spikes")
	priorPixels := fs.Int("prior-pixels", 0, "side of the smooth-local estimate's window, pixels (0: 7; 9 holds more of a large field, at about 3× the cost per refit)")
	priorLags := fs.Int("prior-lags", 0, "lags in the smooth-local estimate's window (0: 6)")
	lambdaFlag := fs.String("lambda", "0", "ridge penalty λ; 0 takes the default, 100 × the stimulus pixel variance; \"evidence\" chooses it by empirical Bayes at the end of each block for the blocks that follow")
	maxUnits := fs.Int("max-units", ingest.DefaultMaxUnits, "cap on distinct unit ids per block")
	apiToken := fs.String("api-token", "", "when set, required by the HTTP commands (POST /api/…) and exports, header "+display.TokenHeader)
	shardFlag := fs.String("shard", "0/1", "map only the units of shard i of n (FNV-1a-32 of the unit id mod n); every worker reads all frames")
	replicas := fs.Int("replicas", 0, "JetStream replicas of the rig's stream when this worker creates it (3 on a three-server cluster); 0 keeps an existing stream's, 1 for a new one")
	noAnnounce := fs.Bool("no-announce", false, "do not announce this worker on NATS (the service \"livefield\" that `livefield view` merges)")
	noJS := fs.Bool("no-jetstream", false, "read core NATS even when the server has JetStream (messages sent during a disconnect are then lost)")
	if err := parse(fs, args); err != nil {
		return err
	}
	log := slog.New(slog.NewTextHandler(stderr, nil))
	prefix, err := rigPrefix(*rig)
	if err != nil {
		return err
	}
	lambda, evidence, err := parseLambda(*lambdaFlag)
	if err != nil {
		return err
	}
	if *grace <= 0 {
		return fmt.Errorf("--grace %v: must be positive", *grace)
	}
	if *replicas < 0 || *replicas > 5 {
		return fmt.Errorf("--replicas %d: JetStream allows 1 to 5 (0 keeps the stream's)", *replicas)
	}
	if *maxUnits <= 0 {
		return fmt.Errorf("--max-units %d: must be positive", *maxUnits)
	}
	shard, err := ingest.ParseShard(*shardFlag)
	if err != nil {
		return fmt.Errorf("--shard %s: %w", *shardFlag, err)
	}
	opts, err := nf.options("livefield serve "+*rig+" shard "+shard.String(), log)
	if err != nil {
		return err
	}
	ln, err := listen(*addr)
	if err != nil {
		return err
	}
	defer ln.Close()
	nc, err := nf.connect(opts)
	if err != nil {
		return err
	}
	defer nc.Close()
	durable := false
	if !*noJS {
		if durable, err = ingest.HasJetStream(ctx, nc); err != nil {
			return err
		}
	}
	updates := display.NewUpdates()
	r, err := ingest.Start(ctx, nc, ingest.Options{
		Prefix:     prefix,
		StimuliDir: *stimuli,
		Grace:      grace.Seconds(),
		Lambda:     lambda,
		Prior:      online.PriorOptions{WindowPixels: *priorPixels, WindowLags: *priorLags},
		Evidence:   evidence,
		MaxUnits:   *maxUnits,
		Logger:     log,
		Shard:      shard,
		Durable:    durable,
		OnUpdate:   updates.Notify,
		Replicas:   *replicas,
	})
	if err != nil {
		return err
	}
	defer r.Close()
	if h := r.Health(); h.Durable {
		fmt.Fprintf(stdout, "livefield: durable: JetStream stream %s, consumer %s, from sequence %d\n", h.Stream, h.Consumer, h.StartSeq)
	} else {
		why := "the server has no JetStream"
		if *noJS {
			why = "--no-jetstream"
		}
		log.Warn("livefield: not durable ("+why+"): "+ingest.CoreWarning, "prefix", prefix)
	}
	if !*noAnnounce {
		svc, err := shards.Announce(nc, r, shards.Info{Rig: *rig, Prefix: prefix, Shard: shard, HTTP: ln.Addr().String()})
		if err != nil {
			return err
		}
		defer func() { _ = svc.Stop() }()
		fmt.Fprintf(stdout, "livefield: announced as service %q instance %s (rig %s, shard %s)\n", shards.ServiceName, svc.ID(), *rig, shard)
	}
	fmt.Fprintf(stdout, "livefield: mapping %s.* (shard %s) from %s\nlivefield: open http://%s/\n", prefix, shard, redact(nf.url), ln.Addr())
	return serveHTTP(ctx, ln, r, updates, *apiToken, stdout)
}

// parseLambda reads a --lambda flag: a penalty ≥ 0 (0: the estimator's
// default) or "evidence".
func parseLambda(s string) (lambda float64, evidence bool, err error) {
	if s == "evidence" {
		return 0, true, nil
	}
	v, err := strconv.ParseFloat(s, 64)
	if err != nil || v < 0 || math.IsNaN(v) || math.IsInf(v, 0) {
		return 0, false, fmt.Errorf("--lambda %s: must be a number ≥ 0 or \"evidence\"", s)
	}
	return v, false, nil
}
