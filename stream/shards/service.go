package shards

import (
	"encoding/json"
	"errors"
	"fmt"
	"strconv"
	"sync"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/micro"

	"livefield/online"
	"livefield/stream/ingest"
)

// The service every worker announces.
const (
	ServiceName    = "livefield"
	ServiceVersion = "1.0.0"
	// subjectRoot is the first token of the endpoints' subjects.
	subjectRoot = "livefield-svc"
	// PartSize bounds one reply (the server's default max_payload is 1 MiB).
	PartSize = 256 << 10
	// keptParts is how many multi-part replies a service keeps for their
	// later parts.
	keptParts = 16
)

// Reply headers of a reply in parts.
const (
	HeaderRef       = "Livefield-Ref"
	HeaderParts     = "Livefield-Parts"
	HeaderUnchanged = "Livefield-Unchanged" // "1": the snapshot is the one the asker named
)

// Worker is what a shard worker offers (an *ingest.Rig).
type Worker interface {
	Snapshot() *online.Snapshot
	Health() ingest.Health
	Reset()
	FlagSTC(id string, on bool) error
	SetCriterion(target, fraction float64) error
}

// Info describes a worker in its announcement.
type Info struct {
	Rig    string       // the rig's name, e.g. "rig1"
	Prefix string       // its subject prefix, e.g. "livefield.rig1"
	Shard  ingest.Shard // the worker's share of the units
	HTTP   string       // the worker's own page, e.g. "127.0.0.1:8081" (optional)
}

// ShardSubject is the subject group of a shard's endpoints, e.g.
// "livefield-svc.livefield.rig1.s0of2".
func ShardSubject(prefix string, sh ingest.Shard) string {
	return fmt.Sprintf("%s.%s.s%dof%d", subjectRoot, prefix, sh.Index, max(sh.Count, 1))
}

// Service is one worker's announcement on NATS. Stop withdraws it.
type Service struct {
	svc micro.Service
	w   Worker

	mu      sync.Mutex
	next    uint64
	kept    map[string][]byte // ref → a multi-part reply
	order   []string          // refs of kept, oldest first
	lastPtr *online.Snapshot  // the snapshot of lastRef
	lastRef string
	lastEnc []byte
}

// Announce registers w as an instance of the service "livefield" on nc.
func Announce(nc *nats.Conn, w Worker, info Info) (*Service, error) {
	if info.Prefix == "" || info.Rig == "" {
		return nil, errors.New("shards: Info needs Rig and Prefix")
	}
	svc, err := micro.AddService(nc, micro.Config{
		Name:        ServiceName,
		Version:     ServiceVersion,
		Description: "livefield worker of rig " + info.Rig + ", shard " + info.Shard.String(),
		Metadata: map[string]string{
			"rig": info.Rig, "prefix": info.Prefix, "shard": info.Shard.String(), "http": info.HTTP,
		},
	})
	if err != nil {
		return nil, fmt.Errorf("shards: announcing: %w", err)
	}
	s := &Service{svc: svc, w: w, kept: map[string][]byte{}}
	g := svc.AddGroup(ShardSubject(info.Prefix, info.Shard))
	for name, h := range map[string]micro.HandlerFunc{
		"snapshot": s.snapshot, "unit": s.unit, "health": s.health, "control": s.control,
	} {
		if err := g.AddEndpoint(name, h); err != nil {
			_ = svc.Stop()
			return nil, fmt.Errorf("shards: endpoint %s: %w", name, err)
		}
	}
	return s, nil
}

// ID is the service instance's id.
func (s *Service) ID() string { return s.svc.Info().ID }

// Stop withdraws the announcement; the worker goes on.
func (s *Service) Stop() error { return s.svc.Stop() }

// partRequest asks for part Part of the reply Ref (Ref empty: a new reply).
type partRequest struct {
	Ref   string `json:"ref,omitempty"`
	Part  int    `json:"part,omitempty"`
	Known string `json:"known,omitempty"` // snapshot only: the ref the asker holds
	ID    string `json:"id,omitempty"`    // unit only
}

func (s *Service) snapshot(req micro.Request) {
	var pr partRequest
	if !decode(req, &pr) {
		return
	}
	if pr.Ref != "" {
		s.respondPart(req, pr.Ref, pr.Part)
		return
	}
	snap := s.w.Snapshot()
	s.mu.Lock()
	if snap != s.lastPtr || s.lastEnc == nil {
		b, err := json.Marshal(snap) // "null" before the first update
		if err != nil {
			s.mu.Unlock()
			_ = req.Error("500", "encoding the snapshot: "+err.Error(), nil)
			return
		}
		s.next++
		s.lastPtr, s.lastRef, s.lastEnc = snap, "s"+strconv.FormatUint(s.next, 10), b
	}
	ref, body := s.lastRef, s.lastEnc
	s.mu.Unlock()
	if pr.Known != "" && pr.Known == ref {
		_ = req.Respond(nil, micro.WithHeaders(micro.Headers{HeaderRef: {ref}, HeaderUnchanged: {"1"}}))
		return
	}
	s.respond(req, ref, body)
}

func (s *Service) unit(req micro.Request) {
	var pr partRequest
	if !decode(req, &pr) {
		return
	}
	if pr.Ref != "" {
		s.respondPart(req, pr.Ref, pr.Part)
		return
	}
	d, ok := s.w.Snapshot().Detail(pr.ID)
	if !ok {
		_ = req.Error("404", fmt.Sprintf("unknown unit %q", pr.ID), nil)
		return
	}
	b, err := json.Marshal(d)
	if err != nil {
		_ = req.Error("500", "encoding the unit: "+err.Error(), nil)
		return
	}
	s.mu.Lock()
	s.next++
	ref := "u" + strconv.FormatUint(s.next, 10)
	s.mu.Unlock()
	s.respond(req, ref, b)
}

func (s *Service) health(req micro.Request) {
	b, err := json.Marshal(s.w.Health())
	if err != nil {
		_ = req.Error("500", "encoding the health: "+err.Error(), nil)
		return
	}
	_ = req.Respond(b)
}

// Control is the body of a control request.
type Control struct {
	Command  string  `json:"command"` // reset, flag_stc, unflag_stc, criterion
	ID       string  `json:"id,omitempty"`
	Target   float64 `json:"target,omitempty"`
	Fraction float64 `json:"fraction,omitempty"`
}

func (s *Service) control(req micro.Request) {
	var c Control
	if err := json.Unmarshal(req.Data(), &c); err != nil {
		_ = req.Error("400", "bad control request: "+err.Error(), nil)
		return
	}
	var err error
	switch c.Command {
	case "reset":
		s.w.Reset()
	case "flag_stc", "unflag_stc":
		if c.ID == "" {
			_ = req.Error("400", c.Command+" needs an id", nil)
			return
		}
		err = s.w.FlagSTC(c.ID, c.Command == "flag_stc")
	case "criterion":
		err = s.w.SetCriterion(c.Target, c.Fraction)
	default:
		_ = req.Error("400", fmt.Sprintf("unknown command %q", c.Command), nil)
		return
	}
	if err != nil {
		_ = req.Error("409", err.Error(), nil)
		return
	}
	_ = req.Respond([]byte(`{"ok":true}`))
}

// respond sends body, in parts when it is larger than PartSize.
func (s *Service) respond(req micro.Request, ref string, body []byte) {
	if len(body) <= PartSize {
		_ = req.Respond(body, micro.WithHeaders(micro.Headers{HeaderRef: {ref}, HeaderParts: {"1"}}))
		return
	}
	s.mu.Lock()
	if _, ok := s.kept[ref]; !ok {
		s.kept[ref] = body
		s.order = append(s.order, ref)
		for len(s.order) > keptParts {
			delete(s.kept, s.order[0])
			s.order = s.order[1:]
		}
	}
	s.mu.Unlock()
	s.respondPart(req, ref, 0)
}

func (s *Service) respondPart(req micro.Request, ref string, part int) {
	s.mu.Lock()
	body, ok := s.kept[ref]
	s.mu.Unlock()
	parts := (len(body) + PartSize - 1) / PartSize
	if !ok || part < 0 || part >= parts {
		_ = req.Error("410", fmt.Sprintf("no part %d of reply %q (gone; ask again)", part, ref), nil)
		return
	}
	end := min((part+1)*PartSize, len(body))
	_ = req.Respond(body[part*PartSize:end], micro.WithHeaders(micro.Headers{HeaderRef: {ref}, HeaderParts: {strconv.Itoa(parts)}}))
}

func decode(req micro.Request, v any) bool {
	if len(req.Data()) == 0 {
		return true
	}
	if err := json.Unmarshal(req.Data(), v); err != nil {
		_ = req.Error("400", "bad request: "+err.Error(), nil)
		return false
	}
	return true
}
