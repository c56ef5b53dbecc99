package main

import (
	"crypto/tls"
	"errors"
	"flag"
	"fmt"
	"log/slog"
	"strings"
	"time"

	"github.com/nats-io/nats.go"
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
	opts := connectOptions(name, log)
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

// connectOptions are the connection options every livefield client uses:
// reconnect forever, and log connection changes (never credentials).
func connectOptions(name string, log *slog.Logger) []nats.Option {
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
