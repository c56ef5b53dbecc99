package display

import (
	"encoding/json"
	"net/http"
	"net/http/httptest"
	"strings"
	"sync"
	"testing"
)

// fakePractice is a practice run that is done once stopped.
type fakePractice struct {
	mu      sync.Mutex
	stopped bool
}

func (f *fakePractice) Stop() { f.mu.Lock(); f.stopped = true; f.mu.Unlock() }

func (f *fakePractice) State() string {
	f.mu.Lock()
	defer f.mu.Unlock()
	if f.stopped {
		return "done"
	}
	return "running"
}

func (f *fakePractice) Result() any {
	if f.State() != "done" {
		return nil
	}
	return map[string]any{"state": "done", "block": "B1"}
}

// TestPracticeHandler walks the endpoints through a practice: the report
// says "running" until the stop, the stop needs the token when one is set
// and answers 202, and then the report is served.
func TestPracticeHandler(t *testing.T) {
	p := &fakePractice{}
	srv := httptest.NewServer(PracticeHandler(p, "secret"))
	defer srv.Close()
	steps := []struct {
		name, method, path, token string
		code                      int
		body                      string // a substring of the JSON answer
	}{
		{"report while running", http.MethodGet, "/api/practice/report", "", http.StatusOK, `"state":"running"`},
		{"stop without the token", http.MethodPost, "/api/practice/stop", "", http.StatusUnauthorized, `"error"`},
		{"stop with a wrong token", http.MethodPost, "/api/practice/stop", "guess", http.StatusUnauthorized, `"error"`},
		{"still running", http.MethodGet, "/api/practice/report", "", http.StatusOK, `"state":"running"`},
		{"stop", http.MethodPost, "/api/practice/stop", "secret", http.StatusAccepted, `"state":"done"`},
		{"report when done", http.MethodGet, "/api/practice/report", "", http.StatusOK, `"block":"B1"`},
		{"stop by GET", http.MethodGet, "/api/practice/stop", "", http.StatusMethodNotAllowed, ""},
	}
	for _, s := range steps {
		req, _ := http.NewRequest(s.method, srv.URL+s.path, nil)
		if s.token != "" {
			req.Header.Set(TokenHeader, s.token)
		}
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		var b strings.Builder
		var v any
		err = json.NewDecoder(resp.Body).Decode(&v)
		resp.Body.Close()
		if s.body != "" {
			raw, _ := json.Marshal(v)
			b.Write(raw)
			if err != nil || resp.Header.Get("Content-Type") != "application/json" {
				t.Errorf("%s: %v, content type %q", s.name, err, resp.Header.Get("Content-Type"))
			}
		}
		if resp.StatusCode != s.code || !strings.Contains(b.String(), s.body) {
			t.Errorf("%s: %d %s, want %d with %s", s.name, resp.StatusCode, b.String(), s.code, s.body)
		}
	}
}
