package main

import (
	"bytes"
	"context"
	"io"
	"log/slog"
	"net"
	"net/http"
	"regexp"
	"strconv"
	"testing"
	"time"

	"livefield/stream/ingest"
)

// Beyond loopback the page's controls need a token, made up and printed
// when none is given; on loopback none is needed.
func TestWebTokenBeyondLoopback(t *testing.T) {
	for _, c := range []struct {
		name, addr, given string
		wantToken         bool
	}{
		{"loopback", "127.0.0.1:0", "", false},
		{"all interfaces", "0.0.0.0:0", "", true},
		{"given", "0.0.0.0:0", "mine", true},
	} {
		t.Run(c.name, func(t *testing.T) {
			ln, err := net.Listen("tcp", c.addr)
			if err != nil {
				t.Skipf("cannot listen on %s here: %v", c.addr, err)
			}
			var out bytes.Buffer
			src, err := ingest.NewLoop(ingest.Options{Logger: quietLog()})
			if err != nil {
				t.Fatal(err)
			}
			token, err := webToken(ln, c.given, &out)
			if err != nil {
				t.Fatal(err)
			}
			if c.wantToken && c.given == "" {
				m := regexp.MustCompile(`\?token=([0-9a-f]{32})`).FindStringSubmatch(out.String())
				if m == nil || m[1] != token {
					t.Fatalf("token %q not printed in %q", token, out.String())
				}
			}
			if (token != "") != c.wantToken {
				t.Fatalf("token %q, want one: %v", token, c.wantToken)
			}
			ctx, cancel := context.WithCancel(context.Background())
			done := make(chan error, 1)
			go func() { done <- serveHTTP(ctx, ln, src, nil, token, io.Discard) }()
			defer func() { cancel(); <-done }()
			// Requests go to loopback only, whatever the listener.
			url := "http://127.0.0.1:" + strconv.Itoa(ln.Addr().(*net.TCPAddr).Port) + "/api/reset"
			post := func(tok string) int {
				req, _ := http.NewRequest(http.MethodPost, url, nil)
				if tok != "" {
					req.Header.Set("X-Livefield-Token", tok)
				}
				var resp *http.Response
				for deadline := time.Now().Add(5 * time.Second); ; {
					resp, err = http.DefaultClient.Do(req)
					if err == nil || time.Now().After(deadline) {
						break
					}
					time.Sleep(10 * time.Millisecond)
				}
				if err != nil {
					t.Fatal(err)
				}
				resp.Body.Close()
				return resp.StatusCode
			}
			if !c.wantToken {
				if code := post(""); code != http.StatusOK && code != http.StatusNoContent && code != http.StatusAccepted {
					t.Errorf("reset on loopback without a token: %d", code)
				}
				return
			}
			if code := post(""); code != http.StatusUnauthorized && code != http.StatusForbidden {
				t.Errorf("reset without the token: %d, want 401 or 403", code)
			}
			if code := post(token); code >= 300 {
				t.Errorf("reset with the token: %d", code)
			}
		})
	}
}

func quietLog() *slog.Logger { return slog.New(slog.NewTextHandler(io.Discard, nil)) }
