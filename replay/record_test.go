package replay

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"strings"
	"sync"
	"testing"
	"time"

	"livefield/replay/session"
)

// fullDisk accepts limit bytes, then fails every write like a full disk.
type fullDisk struct {
	mu    sync.Mutex
	buf   bytes.Buffer
	limit int
}

var errNoSpace = errors.New("no space left on device")

func (d *fullDisk) Write(p []byte) (int, error) {
	d.mu.Lock()
	defer d.mu.Unlock()
	room := d.limit - d.buf.Len()
	if len(p) > room {
		d.buf.Write(p[:max(room, 0)])
		return max(room, 0), errNoSpace
	}
	return d.buf.Write(p)
}

// TestRecordDiskFull: when the disk fills while recording, the recorder
// reports a clear error and the part written reads back up to its last
// whole record.
func TestRecordDiskFull(t *testing.T) {
	nc := startNATS(t)
	disk := &fullDisk{limit: 20000}
	w, err := session.NewWriter(disk, session.Header{Rig: "r1", Prefix: "livefield.r1"})
	if err != nil {
		t.Fatal(err)
	}
	rec, err := StartRecorder(nc, "livefield.r1", w, nil)
	if err != nil {
		t.Fatal(err)
	}
	msg := []byte(`{"unit":["1","2"],"t":[1.5,1.75]}` + strings.Repeat(" ", 3000))
	for i := 0; i < 40; i++ {
		if err := nc.Publish("livefield.r1.spikes", msg); err != nil {
			t.Fatal(err)
		}
	}
	if err := nc.Flush(); err != nil {
		t.Fatal(err)
	}
	for deadline := time.Now().Add(10 * time.Second); rec.Err() == nil; time.Sleep(time.Millisecond) {
		if time.Now().After(deadline) {
			t.Fatal("no error after 10 s of writing to a full disk")
		}
	}
	err = rec.Close()
	if err == nil || !errors.Is(err, errNoSpace) || !strings.HasPrefix(err.Error(), "session: writing after ") {
		t.Fatalf("Close returned %v, want the session write error wrapping the disk's", err)
	}
	if again := rec.Close(); !errors.Is(again, errNoSpace) {
		t.Errorf("second Close returned %v", again)
	}
	r, err := session.NewReader(bytes.NewReader(disk.buf.Bytes()))
	if err != nil {
		t.Fatal(err)
	}
	n, torn := 0, 0
	for {
		got, err := r.Next()
		if err == io.EOF {
			break
		}
		if errors.Is(err, session.ErrTruncated) {
			torn++
			continue
		}
		if err != nil {
			t.Fatal(err)
		}
		if got.Subject != "spikes" || !bytes.Equal(got.Data, msg) {
			t.Fatalf("record %d: %q", n, got.Subject)
		}
		n++
	}
	// Each record is 12 + 9 + len("spikes") + len(msg) bytes.
	size := 12 + 9 + 6 + len(msg)
	head := len(session.Magic) + len(`{"rig":"r1","prefix":"livefield.r1","created":"0001-01-01T00:00:00Z"}`) + 1
	if want := (disk.limit - head) / size; n != want || torn != 1 {
		t.Errorf("%d whole records and %d torn tails readable, want %d and 1", n, torn, want)
	}
}

// TestRecordCounts records a few messages and checks the counts and the
// subjects kept.
func TestRecordCounts(t *testing.T) {
	nc := startNATS(t)
	path := tempPath(t, "r.lfs")
	w, err := session.Create(path, session.Header{Rig: "r2", Prefix: "livefield.r2"})
	if err != nil {
		t.Fatal(err)
	}
	rec, err := StartRecorder(nc, "livefield.r2", w, nil)
	if err != nil {
		t.Fatal(err)
	}
	msgs := []struct{ subj, data string }{
		{"block", `{"kind":"start","block":"B1","t":0,"stimulus":{"type":"binary","width":4,"height":4,"seed":1}}`},
		{"frames", `{"block":"B1","index":[0],"t":[0]}`},
		{"control", `{"command":"reset"}`},
		{"block", `{"kind":"end","block":"B1","t":1}`},
	}
	for _, m := range msgs {
		nc.Publish("livefield.r2."+m.subj, []byte(m.data))
	}
	nc.Publish("livefield.other.spikes", []byte(`{}`)) // another rig: not recorded
	nc.Flush()
	for deadline := time.Now().Add(10 * time.Second); rec.Stats().Messages < int64(len(msgs)); time.Sleep(time.Millisecond) {
		if time.Now().After(deadline) {
			t.Fatalf("%d messages recorded after 10 s", rec.Stats().Messages)
		}
	}
	if err := rec.Close(); err != nil {
		t.Fatal(err)
	}
	st := rec.Stats()
	if st.Messages != 4 || st.Blocks != 1 {
		t.Errorf("stats %+v, want 4 messages, 1 block", st)
	}
	got := readRecords(t, path)
	if len(got) != len(msgs) {
		t.Fatalf("%d records, want %d", len(got), len(msgs))
	}
	for i, m := range msgs {
		if got[i].Subject != m.subj || string(got[i].Data) != m.data {
			t.Errorf("record %d = %s %s", i, got[i].Subject, got[i].Data)
		}
		if i > 0 && got[i].At.Before(got[i-1].At) {
			t.Errorf("record %d arrived before record %d", i, i-1)
		}
	}
	if _, err := StartRecorder(nc, "livefield.r2.>", w, nil); err == nil {
		t.Error("a wildcard prefix was accepted")
	}
}

// TestPlayPacing plays the committed session on a virtual clock: the waits
// add up to the span after From divided by the speed.
func TestPlayPacing(t *testing.T) {
	for _, c := range []struct {
		speed float64
		from  time.Duration
	}{{4, 0}, {1, 20 * time.Second}} {
		t.Run(fmt.Sprintf("speed %v from %v", c.speed, c.from), func(t *testing.T) {
			f, err := session.Open(fixturePath)
			if err != nil {
				t.Fatal(err)
			}
			defer f.Close()
			var waited time.Duration
			var first session.Record
			n := 0
			clock := &vclock{t: fixtureStart}
			st, err := Play(context.Background(), f.Reader, PlayOptions{Speed: c.speed, From: c.from, Now: clock.Now,
				Wait: func(_ context.Context, d time.Duration) error {
					waited += d
					clock.add(d)
					return nil
				}}, func(r session.Record) error {
				if n == 0 {
					first = r.Clone()
				}
				n++
				return nil
			})
			if err != nil {
				t.Fatal(err)
			}
			if first.Subject != "block" || !strings.Contains(string(first.Data), `"start"`) {
				t.Errorf("first record delivered %s %s, want the block start", first.Subject, first.Data)
			}
			// The waits add up to the span after From, scaled.
			want := time.Duration(float64(st.Span-c.from) / c.speed)
			if waited != want {
				t.Errorf("waited %v in all, want about %v", waited, want)
			}
			if c.from > 0 && (st.Skipped == 0 || st.Records+st.Skipped != int64(len(readRecords(t, fixturePath)))) {
				t.Errorf("skipped %d, delivered %d", st.Skipped, st.Records)
			}
		})
	}
}

// BenchmarkReplayFullSpeed feeds the committed 30 s session through the
// reader and a feeder at full speed; x-realtime is session seconds per
// second of replay.
func BenchmarkReplayFullSpeed(b *testing.B) {
	b.ReportAllocs()
	var span time.Duration
	for b.Loop() {
		f, err := session.Open(fixturePath)
		if err != nil {
			b.Fatal(err)
		}
		feeder, err := NewFeeder(FeedOptions{})
		if err != nil {
			b.Fatal(err)
		}
		st, err := Play(context.Background(), f.Reader, PlayOptions{}, func(r session.Record) error { _ = feeder.FeedRecord(r); return nil })
		if err != nil {
			b.Fatal(err)
		}
		feeder.Finish()
		f.Close()
		span = st.Span
	}
	b.ReportMetric(span.Seconds()*float64(b.N)/b.Elapsed().Seconds(), "x-realtime")
}
