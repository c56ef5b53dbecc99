package display

import (
	"encoding/json"
	"fmt"
	"io"
	"math/rand/v2"
	"net/http"
	"net/http/httptest"
	"strings"
	"sync"
	"testing"

	"livefield/online"
)

// fakeSource records the commands it is given.
type fakeSource struct {
	mu       sync.Mutex
	snap     *online.Snapshot
	resets   int
	stc      map[string]bool
	target   float64
	fraction float64
}

func (f *fakeSource) Snapshot() *online.Snapshot { f.mu.Lock(); defer f.mu.Unlock(); return f.snap }
func (f *fakeSource) Health() any                { return map[string]int{"bins": 7} }
func (f *fakeSource) Reset()                     { f.mu.Lock(); f.resets++; f.mu.Unlock() }
func (f *fakeSource) FlagSTC(id string, on bool) error {
	f.mu.Lock()
	defer f.mu.Unlock()
	if f.stc == nil {
		f.stc = map[string]bool{}
	}
	f.stc[id] = on
	return nil
}
func (f *fakeSource) SetCriterion(t, fr float64) error {
	f.mu.Lock()
	f.target, f.fraction = t, fr
	f.mu.Unlock()
	return nil
}

// mapped returns a snapshot of a real mapper fed 4×3 binary noise and two
// units: "a" fires on pixel (row 1, column 2) being bright at lag 0, "b" at
// random.
func mapped(t *testing.T) *online.Snapshot {
	t.Helper()
	const w, h, lags = 4, 3, 2
	m, err := online.NewMapper(online.Config{Width: w, Height: h, Lags: lags, FramePeriod: 1.0 / 60, White: true, PixelVariance: 1})
	if err != nil {
		t.Fatal(err)
	}
	a, b := m.Unit("a"), m.Unit("b")
	rng := rand.New(rand.NewPCG(1, 2))
	frame := make([]float64, w*h)
	counts := make([]online.Count, 0, 2)
	for range 3000 {
		for i := range frame {
			frame[i] = float64(2*rng.IntN(2) - 1)
		}
		counts = counts[:0]
		if frame[1*w+2] > 0 {
			counts = append(counts, online.Count{Unit: a, N: 2})
		}
		if rng.IntN(4) == 0 {
			counts = append(counts, online.Count{Unit: b, N: 1})
		}
		m.AddBin(frame, counts)
	}
	return m.Update()
}

func do(t *testing.T, h http.Handler, method, path, body string) (int, []byte) {
	t.Helper()
	var rd io.Reader
	if body != "" {
		rd = strings.NewReader(body)
	}
	rec := httptest.NewRecorder()
	h.ServeHTTP(rec, httptest.NewRequest(method, path, rd))
	res := rec.Result()
	out, _ := io.ReadAll(res.Body)
	if ct := res.Header.Get("Content-Type"); ct != "application/json" {
		t.Errorf("%s %s: Content-Type %q, want application/json", method, path, ct)
	}
	return res.StatusCode, out
}

func TestUnitsBeforeFirstUpdate(t *testing.T) {
	api := NewAPI(&fakeSource{})
	code, body := do(t, api, "GET", "/api/units", "")
	if code != http.StatusOK {
		t.Fatalf("status %d: %s", code, body)
	}
	var got struct {
		Units []json.RawMessage `json:"units"`
	}
	if err := json.Unmarshal(body, &got); err != nil || got.Units == nil || len(got.Units) != 0 {
		t.Fatalf("want an empty units array, got %s (%v)", body, err)
	}
}

func TestUnitsAndDetail(t *testing.T) {
	src := &fakeSource{snap: mapped(t)}
	api := NewAPI(src)

	code, body := do(t, api, "GET", "/api/units", "")
	if code != http.StatusOK {
		t.Fatalf("units: status %d: %s", code, body)
	}
	var list struct {
		Units []struct {
			ID     string `json:"id"`
			Spikes int64  `json:"spikes"`
		} `json:"units"`
		Summary *json.RawMessage `json:"summary"`
	}
	if err := json.Unmarshal(body, &list); err != nil {
		t.Fatal(err)
	}
	ids := map[string]int64{}
	for _, u := range list.Units {
		ids[u.ID] = u.Spikes
	}
	if len(ids) != 2 || ids["a"] == 0 || ids["b"] == 0 || list.Summary == nil {
		t.Fatalf("units: want a and b with spikes and a summary, got %s", body)
	}
	// A second read of the same snapshot serves the same bytes.
	if _, again := do(t, api, "GET", "/api/units", ""); string(again) != string(body) {
		t.Error("units: second read differs")
	}

	code, body = do(t, api, "GET", "/api/units/a", "")
	if code != http.StatusOK {
		t.Fatalf("detail: status %d: %s", code, body)
	}
	var d struct {
		Shape [3]int    `json:"shape"`
		STA   []float64 `json:"sta"`
		Ridge []float64 `json:"ridge"`
		Z     []float64 `json:"z"`
	}
	if err := json.Unmarshal(body, &d); err != nil {
		t.Fatal(err)
	}
	if d.Shape != [3]int{2, 3, 4} {
		t.Fatalf("detail shape %v, want [lags height width] = [2 3 4]", d.Shape)
	}
	if len(d.STA) != 24 || len(d.Ridge) != 24 || len(d.Z) != 24 {
		t.Fatalf("detail: sta %d, ridge %d, z %d values, want 2·3·4 = 24 each", len(d.STA), len(d.Ridge), len(d.Z))
	}
	// Row-major (lag, row, column): the driving pixel at lag 0, row 1,
	// column 2 is index 0·12 + 1·4 + 2 = 6 and carries the largest STA.
	best := 0
	for i, v := range d.STA {
		if v > d.STA[best] {
			best = i
		}
	}
	if best != 6 {
		t.Errorf("detail: STA peak at flat index %d, want 6 (lag 0, row 1, column 2); sta = %v", best, d.STA)
	}
}

func TestErrors(t *testing.T) {
	src := &fakeSource{snap: mapped(t)}
	api := NewAPI(src)
	long := strings.Repeat("x", MaxIDLength+1)
	big := `{"on":true,"pad":"` + strings.Repeat("x", MaxBody) + `"}`
	// Status codes as RFC 9110 §15.5 defines them.
	for _, tc := range []struct {
		name, method, path, body string
		code                     int
	}{
		{"unknown unit", "GET", "/api/units/zz", "", http.StatusNotFound},
		{"id too long", "GET", "/api/units/" + long, "", http.StatusBadRequest},
		{"unknown endpoint", "GET", "/api/nothing", "", http.StatusNotFound},
		{"wrong method", "DELETE", "/api/units", "", http.StatusMethodNotAllowed},
		{"reset by GET", "GET", "/api/reset", "", http.StatusMethodNotAllowed},
		{"stc no body", "POST", "/api/units/a/stc", "", http.StatusBadRequest},
		{"stc missing on", "POST", "/api/units/a/stc", `{}`, http.StatusBadRequest},
		{"stc wrong type", "POST", "/api/units/a/stc", `{"on":"yes"}`, http.StatusBadRequest},
		{"stc unknown field", "POST", "/api/units/a/stc", `{"on":true,"x":1}`, http.StatusBadRequest},
		{"stc trailing data", "POST", "/api/units/a/stc", `{"on":true} {}`, http.StatusBadRequest},
		{"stc unknown unit", "POST", "/api/units/zz/stc", `{"on":true}`, http.StatusNotFound},
		{"stc body too large", "POST", "/api/units/a/stc", big, http.StatusRequestEntityTooLarge},
		{"criterion malformed", "POST", "/api/criterion", `{"target":`, http.StatusBadRequest},
		{"criterion missing fraction", "POST", "/api/criterion", `{"target":0.9}`, http.StatusBadRequest},
		{"criterion target 1", "POST", "/api/criterion", `{"target":1,"fraction":0.8}`, http.StatusBadRequest},
		{"criterion target 0", "POST", "/api/criterion", `{"target":0,"fraction":0.8}`, http.StatusBadRequest},
		{"criterion fraction 1.2", "POST", "/api/criterion", `{"target":0.9,"fraction":1.2}`, http.StatusBadRequest},
		{"criterion fraction negative", "POST", "/api/criterion", `{"target":0.9,"fraction":-0.1}`, http.StatusBadRequest},
	} {
		t.Run(tc.name, func(t *testing.T) {
			code, body := do(t, api, tc.method, tc.path, tc.body)
			if code != tc.code {
				t.Fatalf("status %d, want %d: %s", code, tc.code, body)
			}
			var e struct{ Error string }
			if err := json.Unmarshal(body, &e); err != nil || !strings.HasPrefix(e.Error, "display: ") {
				t.Fatalf("want a JSON error prefixed \"display: \", got %s", body)
			}
		})
	}
	if src.resets != 0 || src.stc != nil || src.target != 0 {
		t.Errorf("a refused request reached the source: resets %d, stc %v, target %v", src.resets, src.stc, src.target)
	}
}

func TestCommands(t *testing.T) {
	src := &fakeSource{snap: mapped(t)}
	api := NewAPI(src)
	for _, tc := range []struct{ method, path, body string }{
		{"POST", "/api/reset", ""},
		{"POST", "/api/units/b/stc", `{"on":true}`},
		{"POST", "/api/criterion", `{"target":0.95,"fraction":1}`},
	} {
		if code, body := do(t, api, tc.method, tc.path, tc.body); code != http.StatusOK {
			t.Fatalf("%s %s: status %d: %s", tc.method, tc.path, code, body)
		}
	}
	if src.resets != 1 || !src.stc["b"] || src.target != 0.95 || src.fraction != 1 {
		t.Errorf("source got resets %d, stc %v, target %v, fraction %v; want 1, b on, 0.95, 1",
			src.resets, src.stc, src.target, src.fraction)
	}
	code, body := do(t, api, "GET", "/api/health", "")
	if code != http.StatusOK || string(body) != `{"bins":7}` {
		t.Errorf("health: %d %s, want the source's value", code, body)
	}
}

func ExampleAPI() {
	src := &fakeSource{}
	srv := httptest.NewServer(NewAPI(src))
	defer srv.Close()
	res, err := http.Post(srv.URL+"/api/criterion", "application/json", strings.NewReader(`{"target":0.8,"fraction":0.5}`))
	if err != nil {
		panic(err)
	}
	body, _ := io.ReadAll(res.Body)
	res.Body.Close()
	fmt.Println(res.StatusCode, string(body))
	// Output: 200 {"fraction":0.5,"ok":true,"target":0.8}
}

// counted is a source whose counters have a concrete type, as ingest's.
type counted struct{ fakeSource }

type binCount struct {
	Bins int `json:"bins"`
}

func (c *counted) Health() binCount { return binCount{Bins: 7} }

// AnyHealth serves a source's concrete counters as /api/health, as a
// source that returns them as any does.
func TestAnyHealth(t *testing.T) {
	c := &counted{}
	code, body := do(t, NewAPI(AnyHealth[binCount](c)), "GET", "/api/health", "")
	if code != http.StatusOK || string(body) != `{"bins":7}` {
		t.Errorf("health: %d %s, want the source's counters", code, body)
	}
	plain := &fakeSource{}
	if got := AnyHealth(plain); got != SnapshotSource(plain) {
		t.Errorf("AnyHealth wrapped a source that already returns any")
	}
}
