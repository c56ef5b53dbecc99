package main

import (
	"context"
	"crypto/tls"
	"errors"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"math"
	"strconv"
	"strings"
	"time"

	"github.com/nats-io/nats.go"

	"livefield/display"
	"livefield/stream/ingest"
)

// natsFlags are the NATS connection flags (server, credentials, TLS) that
// every command talking to an outside NATS server shares: serve, record,
// simulate and replay --nats.
type natsFlags struct {
	url, creds, token, ca, cert, key string
}

// natsAuthUsage is the usage line of the credential and TLS flags.
const natsAuthUsage = "[--creds FILE | --token T] [--tls-ca FILE --tls-cert FILE --tls-key FILE]"

// add defines the flags on fs; urlUsage is the help of --nats.
func (n *natsFlags) add(fs *flag.FlagSet, urlUsage string) {
	fs.StringVar(&n.url, "nats", "", urlUsage)
	fs.StringVar(&n.creds, "creds", "", "NATS user credentials file")
	fs.StringVar(&n.token, "token", "", "NATS authentication token")
	fs.StringVar(&n.ca, "tls-ca", "", "CA certificate file to verify the NATS server")
	fs.StringVar(&n.cert, "tls-cert", "", "client certificate file (with --tls-key)")
	fs.StringVar(&n.key, "tls-key", "", "client key file (with --tls-cert)")
}

// requiredNATS is the --nats help of the commands that need a server.
const requiredNATS = "NATS server URL (required), e.g. nats://127.0.0.1:4222"

// dial checks the flags and connects, as a client called name.
func (n *natsFlags) dial(name string, log *slog.Logger) (*nats.Conn, error) {
	opts, err := n.options(name, log)
	if err != nil {
		return nil, err
	}
	return n.connect(opts)
}

// connect opens the connection with opts; its error names the server
// without the credentials in its URL.
func (n *natsFlags) connect(opts []nats.Option) (*nats.Conn, error) {
	nc, err := nats.Connect(n.url, opts...)
	if err != nil {
		return nil, fmt.Errorf("--nats %s: %w", redact(n.url), err)
	}
	return nc, nil
}

// options checks the flags and turns them into nats.go options; errors
// name the flag.
func (n *natsFlags) options(name string, log *slog.Logger) ([]nats.Option, error) {
	if n.url == "" {
		return nil, errors.New("--nats is required (e.g. --nats nats://127.0.0.1:4222)")
	}
	if n.creds != "" && n.token != "" {
		return nil, errors.New("--creds and --token: give one, not both")
	}
	if (n.cert == "") != (n.key == "") {
		return nil, errors.New("--tls-cert and --tls-key go together")
	}
	opts := ConnectOptions(name, log)
	if n.creds != "" {
		opts = append(opts, nats.UserCredentials(n.creds))
	}
	if n.token != "" {
		opts = append(opts, nats.Token(n.token))
	}
	if n.ca != "" {
		opts = append(opts, nats.RootCAs(n.ca))
	}
	if n.cert != "" {
		opts = append(opts, nats.ClientCert(n.cert, n.key))
	}
	if n.ca != "" || n.cert != "" {
		opts = append(opts, nats.Secure(&tls.Config{MinVersion: tls.VersionTLS12}))
	}
	return opts, nil
}

// ConnectOptions are the connection options every livefield client uses:
// reconnect forever, and log connection changes (never credentials).
func ConnectOptions(name string, log *slog.Logger) []nats.Option {
	return []nats.Option{
		nats.Name(name),
		nats.MaxReconnects(-1),
		nats.ReconnectWait(time.Second),
		nats.DisconnectErrHandler(func(nc *nats.Conn, err error) {
			if err != nil { // nil when the connection is closed on purpose
				log.Warn("nats: disconnected", "err", err)
			}
		}),
		nats.ReconnectHandler(func(nc *nats.Conn) {
			log.Info("nats: reconnected", "server", nc.ConnectedUrlRedacted(), "reconnects", nc.Stats().Reconnects)
		}),
		nats.ClosedHandler(func(nc *nats.Conn) { log.Info("nats: connection closed") }),
		nats.ErrorHandler(func(nc *nats.Conn, sub *nats.Subscription, err error) {
			subj := ""
			if sub != nil {
				subj = sub.Subject
			}
			log.Warn("nats: asynchronous error", "subject", subj, "err", err)
		}),
	}
}

// rigPrefix checks a rig name and returns its subject prefix.
func rigPrefix(rig string) (string, error) {
	if rig == "" {
		return "", errors.New("--rig is required (e.g. --rig rig1)")
	}
	if strings.ContainsAny(rig, ".*> \t\r\n") {
		return "", fmt.Errorf("--rig %q: a rig name is one subject token (no dots, spaces, * or >)", rig)
	}
	return "livefield." + rig, nil
}

func runServe(ctx context.Context, fs *flag.FlagSet, args []string, stdout, stderr io.Writer) error {
	var nf natsFlags
	nf.add(fs, requiredNATS)
	rig := fs.String("rig", "", "rig name (required); subjects are livefield.<rig>.block|frames|spikes|control")
	addr := fs.String("http", "127.0.0.1:8080", "HTTP listen address")
	stimuli := fs.String("stimuli", ".", "directory of movie stimulus files")
	grace := fs.Duration("grace", 250*time.Millisecond, "how long a bin waits for late spikes")
	lambdaFlag := fs.String("lambda", "0", "ridge penalty λ; 0 takes the default, 100 × the stimulus pixel variance; \"evidence\" chooses it by empirical Bayes at the end of each block for the blocks that follow")
	maxUnits := fs.Int("max-units", ingest.DefaultMaxUnits, "cap on distinct unit ids per block")
	apiToken := fs.String("api-token", "", "when set, required by the HTTP commands (POST /api/…) and exports, header "+display.TokenHeader)
	shardFlag := fs.String("shard", "0/1", "map only the units of shard i of n (FNV-1a-32 of the unit id mod n); every worker reads all frames")
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
	r, err := ingest.Start(ctx, nc, ingest.Options{
		Prefix:     prefix,
		StimuliDir: *stimuli,
		Grace:      grace.Seconds(),
		Lambda:     lambda,
		Evidence:   evidence,
		MaxUnits:   *maxUnits,
		Logger:     log,
		Shard:      shard,
		Durable:    durable,
	})
	if err != nil {
		return err
	}
	defer r.Close()
	if h := r.Counters(); h.Durable {
		fmt.Fprintf(stdout, "livefield: durable: JetStream stream %s, consumer %s, from sequence %d\n", h.Stream, h.Consumer, h.StartSeq)
	} else {
		why := "the server has no JetStream"
		if *noJS {
			why = "--no-jetstream"
		}
		log.Warn("livefield: not durable ("+why+"): "+ingest.CoreWarning, "prefix", prefix)
	}
	fmt.Fprintf(stdout, "livefield: mapping %s.* (shard %s) from %s\nlivefield: open http://%s/\n", prefix, shard, redact(nf.url), ln.Addr())
	return serveHTTP(ctx, ln, r, *apiToken, stdout)
}

// redact drops a user or password from a URL for messages.
func redact(u string) string {
	if i := strings.Index(u, "@"); i >= 0 {
		if j := strings.Index(u, "://"); j >= 0 && j < i {
			return u[:j+3] + "[redacted]@" + u[i+1:]
		}
		return "[redacted]@" + u[i+1:]
	}
	return u
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
