package display

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net/http"
	"strings"

	"livefield/online"
	"livefield/stream/npy"
)

// Estimates is the content of /export/estimates.json: the snapshot (block
// summary and every unit's summary) and every unit's full estimate.
type Estimates struct {
	*online.Snapshot
	Details []*online.UnitDetail `json:"details"`
}

// EstimatesOf collects the estimates of s, units in natural id order.
func EstimatesOf(s *online.Snapshot) Estimates {
	e := Estimates{Snapshot: s, Details: []*online.UnitDetail{}}
	for _, u := range sortedUnits(s.Units) {
		if d, ok := s.Detail(u.ID); ok {
			e.Details = append(e.Details, d)
		}
	}
	return e
}

// WriteRidgeNPY writes one unit's ridge estimate as a float64 NPY array of
// shape (lags, height, width).
func WriteRidgeNPY(w io.Writer, s *online.Snapshot, id string) error {
	if s == nil {
		return ErrNoSnapshot
	}
	d, ok := s.Detail(id)
	if !ok {
		return fmt.Errorf("%w %q", ErrUnknownUnit, id)
	}
	shape := []int{d.Shape[0], d.Shape[1], d.Shape[2]}
	if len(d.Ridge) != shape[0]*shape[1]*shape[2] {
		return fmt.Errorf("display: unit %q: ridge has %d values for shape %v", id, len(d.Ridge), shape)
	}
	data := make([]float64, len(d.Ridge))
	for i, v := range d.Ridge {
		data[i] = float64(v)
	}
	return npy.Write(w, shape, data)
}

// ExportHandler serves the downloads of the current estimates:
//
//	GET /export/overview.png      every unit's map at its peak lag (RenderOverview)
//	GET /export/population.png    reliable units' fields and the aperture (RenderPopulation)
//	GET /export/units/{id}.png    one unit at every lag (RenderUnit)
//	GET /export/units/{id}.npy    one unit's ridge estimate, float64 (lags, height, width)
//	GET /export/estimates.json    Estimates
//
// A response is rendered completely before it is sent, so a failure is a
// clean JSON error. The handler is safe for concurrent use.
func ExportHandler(src SnapshotSource) http.Handler {
	mux := http.NewServeMux()
	picture := func(name string, render func(*bytes.Buffer, *online.Snapshot) error) http.HandlerFunc {
		return func(w http.ResponseWriter, r *http.Request) {
			var b bytes.Buffer
			if err := render(&b, src.Snapshot()); err != nil {
				failRender(w, err)
				return
			}
			send(w, "image/png", name, b.Bytes())
		}
	}
	mux.Handle("GET /export/overview.png", picture("overview.png", func(b *bytes.Buffer, s *online.Snapshot) error { return RenderOverview(b, s) }))
	mux.Handle("GET /export/population.png", picture("population.png", func(b *bytes.Buffer, s *online.Snapshot) error { return RenderPopulation(b, s) }))
	mux.HandleFunc("GET /export/units/{file}", func(w http.ResponseWriter, r *http.Request) {
		file := r.PathValue("file")
		var b bytes.Buffer
		var err error
		var kind string
		if id, ok := strings.CutSuffix(file, ".png"); ok && validID(id) {
			kind, err = "image/png", RenderUnit(&b, src.Snapshot(), id)
		} else if id, ok := strings.CutSuffix(file, ".npy"); ok && validID(id) {
			kind, err = "application/octet-stream", WriteRidgeNPY(&b, src.Snapshot(), id)
		} else {
			fail(w, http.StatusNotFound, "display: no such export %q (want units/{id}.png or units/{id}.npy)", file)
			return
		}
		if err != nil {
			failRender(w, err)
			return
		}
		send(w, kind, "unit-"+fileSafe(file), b.Bytes())
	})
	mux.HandleFunc("GET /export/estimates.json", func(w http.ResponseWriter, r *http.Request) {
		s := src.Snapshot()
		if s == nil {
			failRender(w, ErrNoSnapshot)
			return
		}
		body, err := json.Marshal(EstimatesOf(s))
		if err != nil {
			fail(w, http.StatusInternalServerError, "display: encoding estimates: %v", err)
			return
		}
		send(w, "application/json", "estimates.json", body)
	})
	mux.HandleFunc("/export/", func(w http.ResponseWriter, r *http.Request) {
		fail(w, http.StatusNotFound, "display: no such export: %s %s", r.Method, r.URL.Path)
	})
	return mux
}

func validID(id string) bool { return id != "" && len(id) <= MaxIDLength }

func failRender(w http.ResponseWriter, err error) {
	switch {
	case errors.Is(err, ErrNoSnapshot):
		fail(w, http.StatusServiceUnavailable, "%v", err)
	case errors.Is(err, ErrUnknownUnit):
		fail(w, http.StatusNotFound, "%v", err)
	default:
		fail(w, http.StatusInternalServerError, "%v", err)
	}
}

func send(w http.ResponseWriter, kind, name string, body []byte) {
	h := w.Header()
	h.Set("Content-Type", kind)
	h.Set("Cache-Control", "no-store")
	h.Set("Content-Disposition", fmt.Sprintf("attachment; filename=%q", name))
	_, _ = w.Write(body)
}

// fileSafe keeps letters, digits and . - _ of a name for a download.
func fileSafe(s string) string {
	return strings.Map(func(r rune) rune {
		switch {
		case r >= 'a' && r <= 'z', r >= 'A' && r <= 'Z', r >= '0' && r <= '9', r == '.', r == '-', r == '_':
			return r
		}
		return '_'
	}, s)
}
