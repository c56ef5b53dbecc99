package display

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net/http"
	"sync/atomic"

	"livefield/online"
)

// Source is what the API reads and commands; H is the type of its
// counters (ingest.Health for a rig or a replay's feeder). Every method
// may be called from several goroutines at once.
type Source[H any] interface {
	// Snapshot is the latest published update; nil before the first.
	Snapshot() *online.Snapshot
	// Health is a JSON-encodable copy of the ingest's counters.
	Health() H
	// Reset forgets the estimates of the running block.
	Reset()
	// FlagSTC asks for (on) or stops spike-triggered covariance on a unit.
	FlagSTC(id string, on bool) error
	// SetCriterion changes the target reliability and block fraction.
	SetCriterion(target, fraction float64) error
}

// SnapshotSource is a Source whose counters may be any JSON value: what the
// API and the Server take. AnyHealth makes one of any Source.
type SnapshotSource = Source[any]

// AnyHealth adapts a Source with a concrete counters type to a
// SnapshotSource: display.AnyHealth(rig).
func AnyHealth[H any](src Source[H]) SnapshotSource {
	if s, ok := src.(SnapshotSource); ok {
		return s
	}
	return anyHealth[H]{src}
}

type anyHealth[H any] struct{ Source[H] }

func (s anyHealth[H]) Health() any { return s.Source.Health() }

// Limits of the API's inputs.
const (
	MaxBody     = 4 << 10 // bytes of a POST body
	MaxIDLength = 256     // bytes of a unit id in a path
)

// API serves the JSON endpoints:
//
//	GET  /api/units            the latest Snapshot
//	GET  /api/units/{id}       one unit's UnitDetail (404 when unknown)
//	GET  /api/health           the source's Health value
//	POST /api/reset            forget the estimates (electrode moved)
//	POST /api/units/{id}/stc   {"on": true|false}
//	POST /api/criterion        {"target": 0.9, "fraction": 0.8}
type API struct {
	src  SnapshotSource
	mux  *http.ServeMux
	list atomic.Pointer[encoded] // the unit list of the latest snapshot, encoded once
}

type encoded struct {
	snap *online.Snapshot
	body []byte
}

// NewAPI returns the handler for src.
func NewAPI(src SnapshotSource) *API {
	a := &API{src: src, mux: http.NewServeMux()}
	a.mux.HandleFunc("GET /api/units", a.units)
	a.mux.HandleFunc("GET /api/units/{id}", a.unit)
	a.mux.HandleFunc("GET /api/health", a.health)
	a.mux.HandleFunc("POST /api/reset", a.reset)
	a.mux.HandleFunc("POST /api/units/{id}/stc", a.stc)
	a.mux.HandleFunc("POST /api/criterion", a.criterion)
	// Known paths with another method: 405 with Allow (RFC 9110 §15.5.6).
	for path, allow := range map[string]string{
		"/api/units": "GET", "/api/units/{id}": "GET", "/api/health": "GET",
		"/api/reset": "POST", "/api/units/{id}/stc": "POST", "/api/criterion": "POST",
	} {
		a.mux.HandleFunc(path, func(w http.ResponseWriter, r *http.Request) {
			w.Header().Set("Allow", allow)
			fail(w, http.StatusMethodNotAllowed, "display: %s %s: use %s", r.Method, r.URL.Path, allow)
		})
	}
	a.mux.HandleFunc("/api/", func(w http.ResponseWriter, r *http.Request) {
		fail(w, http.StatusNotFound, "display: no such endpoint: %s %s", r.Method, r.URL.Path)
	})
	return a
}

// ServeHTTP implements http.Handler.
func (a *API) ServeHTTP(w http.ResponseWriter, r *http.Request) { a.mux.ServeHTTP(w, r) }

func (a *API) units(w http.ResponseWriter, _ *http.Request) {
	snap := a.src.Snapshot()
	if c := a.list.Load(); c != nil && c.snap == snap && snap != nil {
		writeBody(w, c.body)
		return
	}
	v := snap
	if v == nil {
		v = &online.Snapshot{}
	}
	if v.Units == nil {
		cp := *v
		cp.Units = []online.UnitSummary{}
		v = &cp
	}
	body, err := json.Marshal(v)
	if err != nil {
		fail(w, http.StatusInternalServerError, "display: encoding units: %v", err)
		return
	}
	if snap != nil {
		a.list.Store(&encoded{snap: snap, body: body})
	}
	writeBody(w, body)
}

func (a *API) unit(w http.ResponseWriter, r *http.Request) {
	id, ok := unitID(w, r)
	if !ok {
		return
	}
	d, ok := a.src.Snapshot().Detail(id)
	if !ok {
		fail(w, http.StatusNotFound, "display: unknown unit %q", id)
		return
	}
	writeJSON(w, d)
}

func (a *API) health(w http.ResponseWriter, _ *http.Request) { writeJSON(w, a.src.Health()) }

func (a *API) reset(w http.ResponseWriter, _ *http.Request) {
	a.src.Reset()
	writeJSON(w, map[string]bool{"ok": true})
}

func (a *API) stc(w http.ResponseWriter, r *http.Request) {
	id, ok := unitID(w, r)
	if !ok {
		return
	}
	var req struct {
		On *bool `json:"on"`
	}
	if !readJSON(w, r, &req) {
		return
	}
	if req.On == nil {
		fail(w, http.StatusBadRequest, `display: stc: body needs "on": true or false`)
		return
	}
	if _, known := a.src.Snapshot().Detail(id); !known {
		fail(w, http.StatusNotFound, "display: unknown unit %q", id)
		return
	}
	if err := a.src.FlagSTC(id, *req.On); err != nil {
		fail(w, http.StatusConflict, "display: stc: %v", err)
		return
	}
	writeJSON(w, map[string]any{"ok": true, "id": id, "on": *req.On})
}

func (a *API) criterion(w http.ResponseWriter, r *http.Request) {
	var req struct {
		Target   *float64 `json:"target"`
		Fraction *float64 `json:"fraction"`
	}
	if !readJSON(w, r, &req) {
		return
	}
	if req.Target == nil || req.Fraction == nil {
		fail(w, http.StatusBadRequest, `display: criterion: body needs "target" and "fraction"`)
		return
	}
	t, f := *req.Target, *req.Fraction
	// The estimator's rule (a target strictly between 0 and 1, a fraction
	// in (0, 1]), checked here too so that a bad request is a 400.
	if err := (online.Criterion{Target: t, Fraction: f}).Check(); err != nil {
		fail(w, http.StatusBadRequest, "display: criterion: %v", err)
		return
	}
	if err := a.src.SetCriterion(t, f); err != nil {
		fail(w, http.StatusConflict, "display: criterion: %v", err)
		return
	}
	writeJSON(w, map[string]any{"ok": true, "target": t, "fraction": f})
}

func unitID(w http.ResponseWriter, r *http.Request) (string, bool) {
	id := r.PathValue("id")
	if id == "" || len(id) > MaxIDLength {
		fail(w, http.StatusBadRequest, "display: unit id must be 1 to %d bytes", MaxIDLength)
		return "", false
	}
	return id, true
}

// readJSON decodes a bounded body holding exactly one JSON object.
func readJSON(w http.ResponseWriter, r *http.Request, v any) bool {
	body, err := io.ReadAll(http.MaxBytesReader(w, r.Body, MaxBody))
	if err != nil {
		var tooBig *http.MaxBytesError
		if errors.As(err, &tooBig) {
			fail(w, http.StatusRequestEntityTooLarge, "display: body over %d bytes", MaxBody)
			return false
		}
		fail(w, http.StatusBadRequest, "display: reading body: %v", err)
		return false
	}
	dec := json.NewDecoder(bytes.NewReader(body))
	dec.DisallowUnknownFields()
	if err := dec.Decode(v); err != nil {
		fail(w, http.StatusBadRequest, "display: bad JSON body: %v", err)
		return false
	}
	if dec.More() {
		fail(w, http.StatusBadRequest, "display: bad JSON body: trailing data")
		return false
	}
	return true
}

func writeJSON(w http.ResponseWriter, v any) {
	body, err := json.Marshal(v)
	if err != nil {
		fail(w, http.StatusInternalServerError, "display: encoding: %v", err)
		return
	}
	writeBody(w, body)
}

func writeBody(w http.ResponseWriter, body []byte) {
	h := w.Header()
	h.Set("Content-Type", "application/json")
	h.Set("Cache-Control", "no-store")
	_, _ = w.Write(body)
}

func fail(w http.ResponseWriter, code int, format string, args ...any) {
	body, _ := json.Marshal(map[string]string{"error": fmt.Sprintf(format, args...)})
	h := w.Header()
	h.Set("Content-Type", "application/json")
	h.Set("Cache-Control", "no-store")
	w.WriteHeader(code)
	_, _ = w.Write(body)
}
