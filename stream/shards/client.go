package shards

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"sort"
	"strconv"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/micro"

	"livefield/stream/ingest"
)

// Instance is one announced worker, as discovery finds it.
type Instance struct {
	ID     string       `json:"id"`
	Rig    string       `json:"rig"`
	Prefix string       `json:"prefix"`
	Shard  ingest.Shard `json:"-"`
	HTTP   string       `json:"http,omitempty"`
}

// Discover pings the service and collects the answers that arrive within
// wait: every worker of every rig reachable from nc, sorted by prefix and
// shard.
func Discover(ctx context.Context, nc *nats.Conn, wait time.Duration) ([]Instance, error) {
	subj, err := micro.ControlSubject(micro.PingVerb, ServiceName, "")
	if err != nil {
		return nil, err
	}
	inbox := nc.NewInbox()
	ch := make(chan *nats.Msg, 256)
	sub, err := nc.ChanSubscribe(inbox, ch)
	if err != nil {
		return nil, fmt.Errorf("shards: discovery: %w", err)
	}
	defer func() { _ = sub.Unsubscribe() }()
	if err := nc.PublishRequest(subj, inbox, nil); err != nil {
		return nil, fmt.Errorf("shards: discovery: %w", err)
	}
	timer := time.NewTimer(wait)
	defer timer.Stop()
	var out []Instance
	for {
		select {
		case <-ctx.Done():
			return out, ctx.Err()
		case <-timer.C:
			sort.Slice(out, func(i, j int) bool {
				if out[i].Prefix != out[j].Prefix {
					return out[i].Prefix < out[j].Prefix
				}
				return out[i].Shard.Index < out[j].Shard.Index
			})
			return out, nil
		case m := <-ch:
			var p micro.Ping
			if json.Unmarshal(m.Data, &p) != nil || p.Name != ServiceName {
				continue
			}
			sh, err := ingest.ParseShard(p.Metadata["shard"])
			if err != nil || p.Metadata["prefix"] == "" {
				continue // not a livefield worker we understand
			}
			out = append(out, Instance{ID: p.ID, Rig: p.Metadata["rig"], Prefix: p.Metadata["prefix"], Shard: sh, HTTP: p.Metadata["http"]})
		}
	}
}

// ServiceError is an error answer of an endpoint.
type ServiceError struct {
	Code, Description string
}

func (e *ServiceError) Error() string { return "shards: " + e.Code + " " + e.Description }

// request sends body to subj and returns the answer, or its service error.
func request(ctx context.Context, nc *nats.Conn, subj string, body any, timeout time.Duration) (*nats.Msg, error) {
	b, err := json.Marshal(body)
	if err != nil {
		return nil, err
	}
	ctx, cancel := context.WithTimeout(ctx, timeout)
	defer cancel()
	m, err := nc.RequestWithContext(ctx, subj, b)
	if err != nil {
		return nil, err
	}
	if d := m.Header.Get(micro.ErrorHeader); d != "" {
		return nil, &ServiceError{Code: m.Header.Get(micro.ErrorCodeHeader), Description: d}
	}
	return m, nil
}

// fetch asks subj for a reply that may come in parts and returns it whole,
// with its ref; unchanged is true when the service said the asker's known
// snapshot is still the latest (no body then).
func fetch(ctx context.Context, nc *nats.Conn, subj string, req partRequest, timeout time.Duration) (body []byte, ref string, unchanged bool, err error) {
	for attempt := 0; ; attempt++ {
		body, ref, unchanged, err = fetchOnce(ctx, nc, subj, req, timeout)
		var se *ServiceError
		if attempt == 0 && errors.As(err, &se) && se.Code == "410" {
			continue // the parts were dropped between two requests: ask again
		}
		return
	}
}

func fetchOnce(ctx context.Context, nc *nats.Conn, subj string, req partRequest, timeout time.Duration) ([]byte, string, bool, error) {
	m, err := request(ctx, nc, subj, req, timeout)
	if err != nil {
		return nil, "", false, err
	}
	ref := m.Header.Get(HeaderRef)
	if m.Header.Get(HeaderUnchanged) == "1" {
		return nil, ref, true, nil
	}
	parts, err := strconv.Atoi(m.Header.Get(HeaderParts))
	if err != nil || parts < 1 {
		return nil, "", false, fmt.Errorf("shards: %s: reply without %s", subj, HeaderParts)
	}
	body := append([]byte(nil), m.Data...)
	for k := 1; k < parts; k++ {
		m, err := request(ctx, nc, subj, partRequest{Ref: ref, Part: k}, timeout)
		if err != nil {
			return nil, "", false, err
		}
		body = append(body, m.Data...)
	}
	return body, ref, false, nil
}
