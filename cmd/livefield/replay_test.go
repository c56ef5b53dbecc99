package main

import (
	"context"
	"encoding/json"
	"errors"
	"io"
	"os"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"

	"livefield/replay/session"
	"livefield/stream/natstest"
)

const committedSession = "../../testdata/sessions/synth-30s.lfs"

// shortSession copies the first seconds of the committed session.
func shortSession(t *testing.T, seconds float64) string {
	t.Helper()
	in, err := session.Open(committedSession)
	if err != nil {
		t.Fatal(err)
	}
	defer in.Close()
	path := filepath.Join(t.TempDir(), "short.lfs")
	w, err := session.Create(path, in.Header())
	if err != nil {
		t.Fatal(err)
	}
	var first time.Time
	for {
		r, err := in.Next()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			t.Fatal(err)
		}
		if first.IsZero() {
			first = r.At
		}
		if r.At.Sub(first).Seconds() > seconds {
			break
		}
		if err := w.Write(r); err != nil {
			t.Fatal(err)
		}
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	return path
}

func atoi(s string) int {
	n, _ := strconv.Atoi(s)
	return n
}

func run(t *testing.T, args ...string) (string, string, int) {
	t.Helper()
	var out, errs syncBuffer
	code := runMain(context.Background(), args, &out, &errs)
	return out.String(), errs.String(), code
}

func TestSessionCommands(t *testing.T) {
	path := shortSession(t, 3)
	dir := t.TempDir()
	cases := []struct {
		name string
		args []string
		want []string // regular expressions the output must match
	}{
		{"replay at full speed", []string{"replay", path, "--speed", "max"},
			[]string{`replayed \d+ messages \(3\.0 s of session\)`, `\d+ units: \d+ significant`}},
		{"replay from a time", []string{"replay", "--speed", "max", "--from", "3", path},
			[]string{`replayed \d+ messages`}},
		{"export", []string{"export", path, "--out", filepath.Join(dir, "x")},
			[]string{`block B1: \d+ units, \d+ files`}},
		{"practice with a scripted stop", []string{"practice", path, "--speed", "max", "--stop-at", "1.5", "--http", "", "--report", filepath.Join(dir, "p.json")},
			[]string{`stopped at 1\.5 s`, `ch00\.1`, `report written to`}},
	}
	outs := map[string]string{}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			out, errs, code := run(t, c.args...)
			outs[c.args[0]] = out
			if code != 0 {
				t.Fatalf("exit %d\n%s\n%s", code, out, errs)
			}
			for _, re := range c.want {
				if !regexp.MustCompile(re).MatchString(out) {
					t.Errorf("output lacks %s:\n%s", re, out)
				}
			}
		})
	}
	exp := regexp.MustCompile(`block B1: (\d+) units, (\d+) files`).FindStringSubmatch(outs["export"])
	// Three files per unit, one more (the smooth-local estimate) per unit
	// that has one, and two for the block.
	priors, _ := filepath.Glob(filepath.Join(dir, "x", "units", "*.prior.npy"))
	if exp == nil || exp[1] == "0" || atoi(exp[2]) != 3*atoi(exp[1])+len(priors)+2 {
		t.Errorf("export wrote %v with %d prior files: want three files per unit, the prior files and two more", exp, len(priors))
	}
	var rep struct {
		State string  `json:"state"`
		StopS float64 `json:"stop_s"`
		Units []any   `json:"units"`
	}
	b, err := os.ReadFile(filepath.Join(dir, "p.json"))
	if err != nil || json.Unmarshal(b, &rep) != nil || rep.State != "done" || rep.StopS != 1.5 || len(rep.Units) == 0 {
		t.Errorf("practice report %v: %s", err, b)
	}
	for _, name := range []string{"contact.png", "summary.json", "units/ch00.1.npy", "units/ch00.1.sta.npy", "units/ch00.1.json"} {
		if _, err := os.Stat(filepath.Join(dir, "x", name)); err != nil {
			t.Errorf("export: %v", err)
		}
	}
}

func TestSessionCommandErrors(t *testing.T) {
	path := shortSession(t, 1)
	cases := []struct {
		name string
		args []string
		want string
		code int
	}{
		{"no file", []string{"replay", "--speed", "max"}, "FILE is missing", 2},
		{"bad speed", []string{"replay", path, "--speed", "fast"}, "--speed", 1},
		{"bad from", []string{"replay", path, "--from", "soon"}, "--from", 1},
		{"not a session", []string{"export", "replay_test.go", "--out", t.TempDir()}, "not a session file", 1},
		{"export without out", []string{"export", path}, "--out is required", 1},
		{"export bad lambda", []string{"export", path, "--out", t.TempDir(), "--lambda", "-1"}, "--lambda -1", 1},
		{"export evidence on a short block", []string{"export", path, "--out", t.TempDir(), "--lambda", "evidence"}, "needs at least as many bins as dimensions", 1},
		{"replay into NATS takes the shared NATS flags", []string{"replay", path, "--nats", "nats://127.0.0.1:1", "--creds", "x.creds", "--token", "t"}, "--creds and --token", 1},
		{"practice at max without stop", []string{"practice", path, "--speed", "max"}, "--stop-at", 1},
		{"record without rig", []string{"record", "--nats", "nats://127.0.0.1:1", "--out", "x.lfs"}, "--rig is required", 1},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			out, errs, code := run(t, c.args...)
			if code != c.code || !strings.Contains(out+errs, c.want) {
				t.Errorf("exit %d, want %d with %q:\n%s\n%s", code, c.code, c.want, out, errs)
			}
		})
	}
}

// TestRecordCommand records from an embedded server until the context ends
// (Ctrl-C) and leaves a readable file.
func TestRecordCommand(t *testing.T) {
	srv := natstest.Start(t, natstest.Options{})
	path := filepath.Join(t.TempDir(), "rec.lfs")
	ctx, cancel := context.WithCancel(context.Background())
	var out, errs syncBuffer
	done := make(chan int, 1)
	go func() {
		done <- runMain(ctx, []string{"record", "--nats", srv.URL(), "--rig", "r9", "--out", path}, &out, &errs)
	}()
	for deadline := time.Now().Add(10 * time.Second); !strings.Contains(out.String(), "recording"); time.Sleep(5 * time.Millisecond) {
		if time.Now().After(deadline) {
			t.Fatalf("record did not start:\n%s\n%s", out.String(), errs.String())
		}
	}
	nc := srv.Connect(t)
	for i := 0; i < 5; i++ {
		nc.Publish("livefield.r9.control", []byte(`{"command":"reset"}`))
	}
	nc.Flush()
	// Poll the file: the writer flushes within a second.
	for deadline := time.Now().Add(10 * time.Second); ; time.Sleep(20 * time.Millisecond) {
		if st, err := os.Stat(path); err == nil && st.Size() > 200 {
			break
		}
		if time.Now().After(deadline) {
			t.Fatal("nothing written after 10 s")
		}
	}
	cancel()
	if code := <-done; code != 0 {
		t.Fatalf("exit %d:\n%s\n%s", code, out.String(), errs.String())
	}
	if !strings.Contains(out.String(), "wrote 5 messages") {
		t.Errorf("final counts missing:\n%s", out.String())
	}
	f, err := session.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	if h := f.Header(); h.Rig != "r9" || h.Prefix != "livefield.r9" {
		t.Errorf("header %+v", h)
	}
}

// TestReplayWithPage replays a short session, timed, through the embedded
// server into the live ingest: the summary after the last message counts
// every message, and the page stays up until the context ends.
func TestReplayWithPage(t *testing.T) {
	path := shortSession(t, 3)
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	var out, errs syncBuffer
	done := make(chan int, 1)
	go func() {
		done <- runMain(ctx, []string{"replay", path, "--speed", "20", "--http", "127.0.0.1:0"}, &out, &errs)
	}()
	finished := regexp.MustCompile(`replay finished: (\d+) messages`)
	for deadline := time.Now().Add(30 * time.Second); !finished.MatchString(out.String()); time.Sleep(10 * time.Millisecond) {
		if time.Now().After(deadline) {
			t.Fatalf("no end of the replay after 30 s:\n%s\n%s", out.String(), errs.String())
		}
	}
	if !regexp.MustCompile(`s of data, [1-9]\d* units`).MatchString(out.String()) {
		t.Errorf("summary without units:\n%s", out.String())
	}
	select {
	case code := <-done:
		t.Fatalf("replay ended (exit %d) before the context:\n%s", code, out.String())
	default:
	}
	cancel()
	if code := <-done; code != 0 {
		t.Fatalf("exit %d:\n%s\n%s", code, out.String(), errs.String())
	}
}
