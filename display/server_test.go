package display

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"net/http"
	"net/http/httptest"
	"strings"
	"sync"
	"testing"
	"time"

	"livefield/online"
	"livefield/stream/npy"
)

// rigSource serves a fixed snapshot and records the commands.
type rigSource struct {
	mu       sync.Mutex
	snap     *online.Snapshot
	resets   int
	flags    map[string]bool
	target   float64
	fraction float64
	reset    func() *online.Snapshot // the snapshot after a reset (nil: unchanged)
	flag     func(id string, on bool)
}

func (f *rigSource) Snapshot() *online.Snapshot {
	f.mu.Lock()
	defer f.mu.Unlock()
	return f.snap
}

func (f *rigSource) set(s *online.Snapshot) {
	f.mu.Lock()
	f.snap = s
	f.mu.Unlock()
}

// Health reports a rig whose NATS link is down, on core NATS, with late
// spikes, refused messages and an update that takes most of its second, as
// /api/health would.
func (f *rigSource) Health() any {
	return map[string]any{
		"bins": 1, "connection": "RECONNECTING", "reconnects": 2, "durable": false, "update_s": 0.72,
		"warning":     "core NATS: messages sent during a disconnect are lost",
		"late_spikes": 3, "rejected": map[string]int{"syntax": 2, "unit-cap": 1},
	}
}

func (f *rigSource) Reset() {
	f.mu.Lock()
	defer f.mu.Unlock()
	f.resets++
	if f.reset != nil {
		f.snap = f.reset()
	}
}

func (f *rigSource) FlagSTC(id string, on bool) error {
	f.mu.Lock()
	defer f.mu.Unlock()
	if f.flags == nil {
		f.flags = map[string]bool{}
	}
	f.flags[id] = on
	if f.flag != nil {
		f.flag(id, on)
	}
	return nil
}

func (f *rigSource) SetCriterion(target, fraction float64) error {
	f.mu.Lock()
	defer f.mu.Unlock()
	f.target, f.fraction = target, fraction
	return nil
}

func (f *rigSource) resetCount() int {
	f.mu.Lock()
	defer f.mu.Unlock()
	return f.resets
}

// startPage serves src behind a test server, its Run going, until the test
// ends.
func startPage(t *testing.T, src SnapshotSource, opt Options) *httptest.Server {
	t.Helper()
	s := NewServer(src, opt)
	ctx, stop := context.WithCancel(context.Background())
	done := make(chan struct{})
	go func() { s.Run(ctx); close(done) }()
	srv := httptest.NewServer(s)
	t.Cleanup(func() { stop(); <-done; srv.Close() })
	return srv
}

func get(t *testing.T, h http.Handler, method, target string, hdr http.Header, body string) *httptest.ResponseRecorder {
	t.Helper()
	r := httptest.NewRequest(method, target, strings.NewReader(body))
	for k, v := range hdr {
		r.Header[k] = v
	}
	w := httptest.NewRecorder()
	h.ServeHTTP(w, r)
	return w
}

func TestTokenGuard(t *testing.T) {
	const token = "correct-horse"
	src := &rigSource{snap: &online.Snapshot{Block: "b", Shape: [3]int{1, 2, 2}}}
	s := NewServer(src, Options{Token: token})
	withHeader := http.Header{TokenHeader: {token}}
	wrong := http.Header{TokenHeader: {"correct-hors"}}
	tests := []struct {
		name         string
		method, path string
		hdr          http.Header
		body         string
		want         int
	}{
		{"page needs no token", "GET", "/", nil, "", 200},
		{"script needs no token", "GET", "/static/js/main.js", nil, "", 200},
		{"unit list without token", "GET", "/api/units", nil, "", 401},
		{"unit list with header", "GET", "/api/units", withHeader, "", 200},
		{"unit without token", "GET", "/api/units/u1", nil, "", 401},
		{"unit with wrong token", "GET", "/api/units/u1", wrong, "", 401},
		{"unit with query, unknown", "GET", "/api/units/u1?token=" + token, nil, "", 404},
		{"health without token", "GET", "/api/health", nil, "", 401},
		{"health with header", "GET", "/api/health", withHeader, "", 200},
		{"unknown endpoint without token", "GET", "/api/nothing", nil, "", 401},
		{"websocket without token", "GET", "/ws", nil, "", 401},
		{"style needs no token", "GET", "/static/style.css", nil, "", 200},
		{"reset without token", "POST", "/api/reset", nil, "", 401},
		{"reset with wrong token", "POST", "/api/reset", wrong, "", 401},
		{"reset with header", "POST", "/api/reset", withHeader, "", 200},
		{"reset with query", "POST", "/api/reset?token=" + token, nil, "", 200},
		{"criterion without token", "POST", "/api/criterion", nil, `{"target":0.8,"fraction":0.5}`, 401},
		{"criterion with token", "POST", "/api/criterion", withHeader, `{"target":0.8,"fraction":0.5}`, 200},
		{"export without token", "GET", "/export/overview.png", nil, "", 401},
		{"export with query", "GET", "/export/overview.png?token=" + token, nil, "", 200},
		{"estimates without token", "GET", "/export/estimates.json", nil, "", 401},
		{"estimates with header", "GET", "/export/estimates.json", withHeader, "", 200},
		{"unknown export with token", "GET", "/export/nothing", withHeader, "", 404},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			w := get(t, s, tc.method, tc.path, tc.hdr, tc.body)
			if w.Code != tc.want {
				t.Fatalf("%s %s: status %d, want %d: %s", tc.method, tc.path, w.Code, tc.want, w.Body)
			}
			if w.Code == 401 && !strings.Contains(w.Body.String(), "display: ") {
				t.Fatalf("error without the package prefix: %s", w.Body)
			}
		})
	}
	if src.resetCount() != 2 {
		t.Errorf("resets %d, want 2 (only the requests with the token)", src.resetCount())
	}
	if src.target != 0.8 || src.fraction != 0.5 {
		t.Errorf("criterion %v, %v", src.target, src.fraction)
	}
}

func TestNoTokenConfigured(t *testing.T) {
	src := &rigSource{snap: &online.Snapshot{Shape: [3]int{1, 2, 2}}}
	s := NewServer(src, Options{})
	for _, path := range []string{"/export/overview.png", "/export/population.png", "/export/estimates.json"} {
		if w := get(t, s, "GET", path, nil, ""); w.Code != 200 {
			t.Errorf("%s: status %d: %s", path, w.Code, w.Body)
		}
	}
	if w := get(t, s, "POST", "/api/reset", nil, ""); w.Code != 200 || src.resetCount() != 1 {
		t.Errorf("reset: status %d, resets %d", w.Code, src.resetCount())
	}
}

func TestExports(t *testing.T) {
	snap := simulated(t)
	s := NewServer(&rigSource{snap: snap}, Options{})
	d, _ := snap.Detail(strongCell.id)

	w := get(t, s, "GET", "/export/units/"+strongCell.id+".npy", nil, "")
	if w.Code != 200 {
		t.Fatalf("npy: %d %s", w.Code, w.Body)
	}
	// The NPY format starts with the magic string "\x93NUMPY" (NumPy
	// Enhancement Proposal 1, "A simple file format for NumPy arrays").
	if !bytes.HasPrefix(w.Body.Bytes(), []byte("\x93NUMPY")) {
		t.Fatalf("npy: no magic string: %q", w.Body.Bytes()[:min(10, w.Body.Len())])
	}
	a, err := npy.Read(bytes.NewReader(w.Body.Bytes()))
	if err != nil {
		t.Fatal(err)
	}
	if fmt.Sprint(a.Shape) != fmt.Sprint([]int{simLags, simHeight, simWidth}) || a.Descr != "<f8" {
		t.Fatalf("npy shape %v dtype %s, want [%d %d %d] <f8", a.Shape, a.Descr, simLags, simHeight, simWidth)
	}
	got := make([]float64, a.Len())
	if err := a.Float64To(got, 0); err != nil {
		t.Fatal(err)
	}
	for i, v := range got {
		if v != float64(d.Ridge[i]) {
			t.Fatalf("npy value %d = %v, ridge has %v", i, v, d.Ridge[i])
		}
	}

	w = get(t, s, "GET", "/export/estimates.json", nil, "")
	var e struct {
		Block   string               `json:"block"`
		Units   []online.UnitSummary `json:"units"`
		Details []online.UnitDetail  `json:"details"`
	}
	if err := json.Unmarshal(w.Body.Bytes(), &e); err != nil {
		t.Fatalf("estimates.json: %v", err)
	}
	var ids []string
	for _, u := range e.Details {
		ids = append(ids, u.ID)
	}
	if strings.Join(ids, ",") != "3,7,12" {
		t.Fatalf("details in order %v, want 3,7,12", ids)
	}
	if len(e.Units) != len(simCells) || len(e.Details[2].Ridge) != simLags*simHeight*simWidth {
		t.Fatalf("estimates: %d units, %d ridge values", len(e.Units), len(e.Details[2].Ridge))
	}

	tests := []struct {
		path, kind string
		code       int
	}{
		{"/export/units/" + strongCell.id + ".png", "image/png", 200},
		{"/export/overview.png", "image/png", 200},
		{"/export/population.png", "image/png", 200},
		{"/export/units/nobody.png", "application/json", 404},
		{"/export/units/nobody.npy", "application/json", 404},
		{"/export/units/12.txt", "application/json", 404},
		{"/export/units/.png", "application/json", 404},
	}
	for _, tc := range tests {
		w := get(t, s, "GET", tc.path, nil, "")
		if w.Code != tc.code || w.Header().Get("Content-Type") != tc.kind {
			t.Errorf("%s: %d %s, want %d %s", tc.path, w.Code, w.Header().Get("Content-Type"), tc.code, tc.kind)
		}
		if tc.code == 200 {
			decodePNG(t, w.Body.Bytes())
		}
	}
}

func TestExportBeforeFirstSnapshot(t *testing.T) {
	s := NewServer(&rigSource{}, Options{})
	for _, path := range []string{"/export/overview.png", "/export/units/1.png", "/export/units/1.npy", "/export/estimates.json"} {
		w := get(t, s, "GET", path, nil, "")
		if w.Code != http.StatusServiceUnavailable || !strings.Contains(w.Body.String(), "display: no snapshot yet") {
			t.Errorf("%s: %d %s", path, w.Code, w.Body)
		}
	}
}

func TestServerPushesSourceUpdates(t *testing.T) {
	src := &rigSource{snap: snapAt(1)}
	s := NewServer(src, Options{Poll: 5 * time.Millisecond})
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan struct{})
	go func() { s.Run(ctx); close(done) }()
	srv := httptest.NewServer(s)
	defer func() { cancel(); <-done; srv.Close() }()
	c := dial(t, wsURL(srv)+"/ws", nil)
	if got := readSnapshot(t, c); got.T != 1 {
		t.Fatalf("first update t=%v", got.T)
	}
	src.set(snapAt(2))
	if got := readSnapshot(t, c); got.T != 2 {
		t.Fatalf("second update t=%v", got.T)
	}
}

func TestPageServed(t *testing.T) {
	s := NewServer(&rigSource{}, Options{})
	tests := []struct{ path, kind, contains string }{
		{"/", "text/html; charset=utf-8", `<script type="module" src="static/js/main.js"`},
		{"/static/js/net.js", "text/javascript; charset=utf-8", "new WebSocket"},
		{"/static/style.css", "text/css; charset=utf-8", "--reliable"},
	}
	for _, tc := range tests {
		w := get(t, s, "GET", tc.path, nil, "")
		if w.Code != 200 || w.Header().Get("Content-Type") != tc.kind || !strings.Contains(w.Body.String(), tc.contains) {
			t.Errorf("%s: %d %q, body has %q: %v", tc.path, w.Code, w.Header().Get("Content-Type"), tc.contains, strings.Contains(w.Body.String(), tc.contains))
		}
	}
	if w := get(t, s, "GET", "/static/missing.js", nil, ""); w.Code != 404 {
		t.Errorf("missing file: %d", w.Code)
	}
}

func TestNewHTTPServerTimeouts(t *testing.T) {
	h := NewHTTPServer("127.0.0.1:0", http.NotFoundHandler())
	for name, d := range map[string]time.Duration{
		"ReadHeaderTimeout": h.ReadHeaderTimeout, "ReadTimeout": h.ReadTimeout,
		"WriteTimeout": h.WriteTimeout, "IdleTimeout": h.IdleTimeout,
	} {
		if d <= 0 {
			t.Errorf("%s not set", name)
		}
	}
	if h.Addr != "127.0.0.1:0" {
		t.Errorf("addr %q", h.Addr)
	}
}

func ExampleNewServer() {
	src := &rigSource{snap: &online.Snapshot{
		Block: "demo-1",
		Shape: [3]int{4, 8, 8},
		Units: []online.UnitSummary{{ID: "10"}, {ID: "2"}},
	}}
	s := NewServer(src, Options{Token: "let-me-in"})
	srv := httptest.NewServer(s) // the command uses NewHTTPServer("127.0.0.1:8080", s)
	defer srv.Close()

	req, _ := http.NewRequest("GET", srv.URL+"/export/estimates.json", nil)
	req.Header.Set(TokenHeader, "let-me-in")
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		fmt.Println(err)
		return
	}
	defer resp.Body.Close()
	body, _ := io.ReadAll(resp.Body)
	var e struct {
		Block string `json:"block"`
		Units []struct {
			ID string `json:"id"`
		} `json:"units"`
	}
	json.Unmarshal(body, &e)
	fmt.Println(resp.StatusCode, e.Block, len(e.Units), "units")
	// Output: 200 demo-1 2 units
}

// A source with an update hook reaches the browsers when it rings, not on
// the next poll: with a poll period far longer than the test's deadlines,
// only the push can deliver the second snapshot.
func TestServerPushesUpdates(t *testing.T) {
	src := &rigSource{snap: snapAt(1)}
	updates := NewUpdates()
	srv := startPage(t, src, Options{Updates: updates, Poll: 24 * time.Hour})
	c := dial(t, wsURL(srv)+"/ws", nil)
	if got := readSnapshot(t, c); got.T != 1 {
		t.Fatalf("first snapshot at t = %v, want 1", got.T)
	}
	for _, sec := range []float64{2, 3} {
		src.set(snapAt(sec))
		updates.Notify("b1", src.Snapshot(), time.Time{})
		if got := readSnapshot(t, c); got.T != online.Float(sec) {
			t.Fatalf("pushed snapshot at t = %v, want %v", got.T, sec)
		}
	}
}

// Notify never blocks, however often it rings before the server looks.
func TestUpdatesNotifyNeverBlocks(t *testing.T) {
	u := NewUpdates()
	for range 1000 {
		u.Notify("", nil, time.Time{})
	}
	if n := len(u.c); n != 1 {
		t.Fatalf("%d notifications pending, want 1", n)
	}
}
