package replay

import (
	"bytes"
	"context"
	"errors"
	"flag"
	"livefield/online"
	"os"
	"strings"
	"testing"
	"time"

	"livefield/replay/session"
)

var update = flag.Bool("update", false, "rewrite testdata/sessions/synth-30s.lfs")

// TestFixture checks that the committed session is what the synthetic rig
// records today (or rewrites it with -update).
func TestFixture(t *testing.T) {
	path := tempPath(t, "fixture.lfs")
	recordSynth(t, path, fixtureSeconds)
	if *update {
		copyFile(t, path, fixturePath)
	}
	got, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	want, err := os.ReadFile(fixturePath)
	if err != nil {
		t.Fatal(err)
	}
	if len(want) > 2<<20 {
		t.Errorf("%s is %d bytes, keep it under 2 MiB", fixturePath, len(want))
	}
	if !bytes.Equal(got, want) {
		t.Fatalf("recording the synthetic rig gives %d bytes that differ from %s (%d bytes); rerun with -update if the rig changed on purpose", len(got), fixturePath, len(want))
	}
}

// TestRecordReplayExact: the estimates from record → file → replay are
// those of feeding the messages as a subscriber received them, to 1e-12.
func TestRecordReplayExact(t *testing.T) {
	path := tempPath(t, "s.lfs")
	direct := recordSynth(t, path, 5)
	// Updates only at the block end, so the comparison needs no arrival
	// times on the direct route.
	opt := FeedOptions{UpdateEvery: time.Hour}
	want := feedAll(t, direct, opt)

	f, err := session.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	feeder, err := NewFeeder(opt)
	if err != nil {
		t.Fatal(err)
	}
	st, err := Play(context.Background(), f.Reader, PlayOptions{}, feeder.FeedRecord)
	if err != nil {
		t.Fatal(err)
	}
	if st.Records != int64(len(direct)) {
		t.Fatalf("replayed %d records, the subscriber saw %d", st.Records, len(direct))
	}
	// The mapper's parallel kernels round differently from run to run
	// (about 1e-13 relative), so bit-for-bit equality is not available.
	sameEstimates(t, feeder.Finish(), want, 1e-12)
}

// TestTruncatedReplays: a file cut inside a record replays every whole
// record before the cut, exactly as the same records fed directly.
func TestTruncatedReplays(t *testing.T) {
	data, err := os.ReadFile(fixturePath)
	if err != nil {
		t.Fatal(err)
	}
	all := readRecords(t, fixturePath)
	// Cut a quarter into the file, inside a record (not at a marker).
	cut := len(data)/4 - 3
	for bytes.HasPrefix(data[cut+3:], []byte{0xF7, 'l', 'f', 0xFE}) {
		cut++
	}
	path := tempPath(t, "cut.lfs")
	if err := os.WriteFile(path, data[:cut+3], 0o644); err != nil {
		t.Fatal(err)
	}
	f, err := session.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	var damage []*session.CorruptError
	var got []session.Record
	_, err = Play(context.Background(), f.Reader, PlayOptions{OnDamage: func(e *session.CorruptError) { damage = append(damage, e) }},
		func(r session.Record) error { got = append(got, r.Clone()); return nil })
	if err != nil {
		t.Fatal(err)
	}
	if len(damage) != 1 || !errors.Is(damage[0], session.ErrTruncated) {
		t.Fatalf("damage reports %v, want one torn tail", damage)
	}
	if len(got) == 0 || len(got) >= len(all) {
		t.Fatalf("%d of %d records before the cut", len(got), len(all))
	}
	for i := range got {
		if !bytes.Equal(got[i].Data, all[i].Data) || !got[i].At.Equal(all[i].At) {
			t.Fatalf("record %d differs from the whole file's", i)
		}
	}
	// The tail record starts at the reported offset and would have ended past the cut.
	if off := damage[0].Offset; off > int64(cut+3) || off < int64(cut+3)-int64(len(all[len(got)].Data))-300 {
		t.Errorf("torn tail reported at byte %d, the file was cut at %d", off, cut+3)
	}
	sameEstimates(t, feedAll(t, got, FeedOptions{}), feedAll(t, all[:len(got)], FeedOptions{}), 1e-12)
}

// TestCorruptRecordReported: a damaged record in the middle is reported
// with its offset and skipped; every other record still replays.
func TestCorruptRecordReported(t *testing.T) {
	data, err := os.ReadFile(fixturePath)
	if err != nil {
		t.Fatal(err)
	}
	all := readRecords(t, fixturePath)
	// Find record 200 by its sync marker and damage its payload.
	k := 200
	off := -1
	for i, n := 0, -1; i+4 <= len(data); i++ {
		if data[i] == 0xF7 && data[i+1] == 'l' && data[i+2] == 'f' && data[i+3] == 0xFE {
			n++
			if n == k {
				off = i
				break
			}
		}
	}
	if off < 0 {
		t.Fatal("record 200 not found")
	}
	bad := append([]byte(nil), data...)
	bad[off+30] ^= 0x01
	path := tempPath(t, "bad.lfs")
	if err := os.WriteFile(path, bad, 0o644); err != nil {
		t.Fatal(err)
	}
	f, err := session.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	// Without OnDamage, Play stops at the damage: never silent.
	if _, err := Play(context.Background(), f.Reader, PlayOptions{}, func(session.Record) error { return nil }); err == nil ||
		!strings.Contains(err.Error(), "byte ") {
		t.Fatalf("Play without OnDamage returned %v, want the damage", err)
	}
	f.Close()
	f, err = session.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	var damage []*session.CorruptError
	n := 0
	st, err := Play(context.Background(), f.Reader, PlayOptions{OnDamage: func(e *session.CorruptError) { damage = append(damage, e) }},
		func(r session.Record) error {
			i := n
			if n >= k {
				i++ // record k is lost
			}
			if !bytes.Equal(r.Data, all[i].Data) {
				t.Fatalf("record %d after the damage differs", n)
			}
			n++
			return nil
		})
	if err != nil {
		t.Fatal(err)
	}
	if len(damage) != 1 || damage[0].Offset != int64(off) || damage[0].Reason != "checksum" {
		t.Fatalf("damage %v, want one checksum error at byte %d", damage, off)
	}
	if st.Records != int64(len(all)-1) || st.Damaged != 1 {
		t.Errorf("%d records, %d damaged; want %d and 1", st.Records, st.Damaged, len(all)-1)
	}
}

// TestPipelinedSameEstimates: a pipelined feeder (the estimator on its own
// goroutine, decoding ahead) publishes the inline feeder's estimates bit
// for bit, with updates every second and with only the final one, and
// calls OnUpdate as often. The estimates are deterministic given the bins
// and the update instants (determinism is the property, no outside source).
func TestPipelinedSameEstimates(t *testing.T) {
	recs := readRecords(t, fixturePath)
	recs = recs[:len(recs)/2] // the first 15 s: a few updates are enough (each is slow under -race)
	for _, tc := range []struct {
		name  string
		every time.Duration
	}{{"every two seconds", 2 * time.Second}, {"final only", FinalOnly}} {
		every := tc.every
		t.Run(tc.name, func(t *testing.T) {
			var updates [2]int
			var finals [2]*online.Snapshot
			for i, pipelined := range []bool{false, true} {
				f, err := NewFeeder(FeedOptions{UpdateEvery: every, Pipelined: pipelined,
					OnUpdate: func(string, *online.Snapshot, time.Time) { updates[i]++ }})
				if err != nil {
					t.Fatal(err)
				}
				for _, r := range recs {
					_ = f.FeedRecord(r)
				}
				finals[i] = f.Finish()
				f.Close()
			}
			if updates[0] != updates[1] || updates[0] == 0 {
				t.Errorf("updates: inline %d, pipelined %d", updates[0], updates[1])
			}
			sameEstimates(t, finals[1], finals[0], 0)
		})
	}
}
