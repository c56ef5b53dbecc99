package ingest

import (
	"hash/fnv"
	"strings"
	"testing"
	"time"

	"livefield/stream/wire"
)

// TestShardOf checks the unit hash against FNV-1a-32 test vectors and Go's
// hash/fnv, so that another tool can compute a unit's shard.
func TestShardOf(t *testing.T) {
	for _, tc := range []struct {
		id   string
		hash uint32
	}{
		// FNV-1a 32-bit vectors of the FNV authors' test suite
		// (Fowler, Noll, Vo; isthe.com/chongo/tech/comp/fnv; from memory,
		// and checked against hash/fnv below).
		{"", 0x811c9dc5},
		{"a", 0xe40c292c},
		{"foobar", 0xbf9cf968},
	} {
		for _, n := range []int{2, 3, 7, 1000} {
			if got := ShardOf(tc.id, n); got != int(tc.hash%uint32(n)) {
				t.Errorf("ShardOf(%q, %d) = %d, want %d", tc.id, n, got, tc.hash%uint32(n))
			}
		}
	}
	for _, id := range []string{"ch00.0", "ch31.11", "unit-7", "ünit"} {
		h := fnv.New32a() // the standard library's FNV-1a
		h.Write([]byte(id))
		if got, want := ShardOf(id, 5), int(h.Sum32()%5); got != want {
			t.Errorf("ShardOf(%q, 5) = %d, hash/fnv gives %d", id, got, want)
		}
	}
	if ShardOf("anything", 1) != 0 || ShardOf("anything", 0) != 0 {
		t.Error("one worker must take every unit")
	}
}

func TestParseShard(t *testing.T) {
	for _, tc := range []struct {
		in   string
		want Shard
		err  string
	}{
		{"0/1", Shard{0, 1}, ""},
		{"1/2", Shard{1, 2}, ""},
		{"2/2", Shard{}, "want 0 ≤ i < n"},
		{"-1/2", Shard{}, "want 0 ≤ i < n"},
		{"0/0", Shard{}, "want 0 ≤ i < n"},
		{"1", Shard{}, "is not i/n"},
		{"a/b", Shard{}, "is not i/n"},
	} {
		got, err := ParseShard(tc.in)
		if tc.err != "" {
			if err == nil || !strings.Contains(err.Error(), tc.err) || !strings.HasPrefix(err.Error(), "ingest: ") {
				t.Errorf("ParseShard(%q): %v, want an error with %q", tc.in, err, tc.err)
			}
			continue
		}
		if err != nil || got != tc.want {
			t.Errorf("ParseShard(%q) = %v, %v; want %v", tc.in, got, err, tc.want)
		}
	}
}

// TestNames: stream and consumer names are valid JetStream names (no
// '.', '*', '>', whitespace or path separators; common practice, no
// source beyond the NATS documentation's naming rules, from memory).
func TestNames(t *testing.T) {
	for _, tc := range []struct {
		prefix   string
		shard    Shard
		stream   string
		consumer string
	}{
		{"livefield.rig1", Shard{}, "LIVEFIELD_RIG1", "LIVEFIELD_RIG1_SHARD_0_OF_1"},
		{"livefield.bench-7", Shard{1, 3}, "LIVEFIELD_BENCH-7", "LIVEFIELD_BENCH-7_SHARD_1_OF_3"},
		{"livefield.a/b\\c", Shard{}, "LIVEFIELD_A_B_C", "LIVEFIELD_A_B_C_SHARD_0_OF_1"},
	} {
		if s, c := StreamName(tc.prefix), ConsumerName(tc.prefix, tc.shard); s != tc.stream || c != tc.consumer {
			t.Errorf("%s %v: stream %q consumer %q, want %q %q", tc.prefix, tc.shard, s, c, tc.stream, tc.consumer)
		}
	}
	cfg := StreamConfig("LIVEFIELD_RIG1", "livefield.rig1")
	if len(cfg.Subjects) != 1 || cfg.Subjects[0] != "livefield.rig1.>" || cfg.MaxMsgSize != DefaultMaxPayload || cfg.MaxAge != 12*time.Hour {
		t.Errorf("stream config %+v", cfg)
	}
}

// TestReferenceRates measures the reference workload as encoded on the
// wire, the figures DefaultPendingMsgs, DefaultPendingBytes and the stream
// limits are sized from: 20 frames messages and 50 spikes messages per
// second, 3840 spikes/s (384 units × 10 Hz, Poisson).
func TestReferenceRates(t *testing.T) {
	const seconds = 20.0
	msgs, spikes := session(t, seconds)
	var bytes int
	for _, m := range msgs {
		bytes += len(m.data) + len(wire.Subject("livefield.rig1", subjectNames[m.subj]))
	}
	perS, bytesPerS := float64(len(msgs))/seconds, float64(bytes)/seconds
	t.Logf("reference workload: %.0f messages/s, %.0f bytes/s, %.0f spikes/s", perS, bytesPerS, float64(spikes)/seconds)
	if perS < 69 || perS > 71 {
		t.Errorf("%.1f messages/s, want 70", perS)
	}
	if bytesPerS < 80e3 || bytesPerS > 130e3 {
		t.Errorf("%.0f bytes/s, outside the 80–130 kB/s the limits assume", bytesPerS)
	}
	// 10 s at 10× real time fit the pending limits.
	if float64(DefaultPendingMsgs) < 100*perS || float64(DefaultPendingBytes) < 100*bytesPerS {
		t.Errorf("pending limits %d messages, %d bytes hold less than 100 s of the reference workload", DefaultPendingMsgs, DefaultPendingBytes)
	}
	if hours := float64(StreamMaxBytes) / bytesPerS / 3600; hours < 12 {
		t.Errorf("the stream holds %.1f h of the reference workload, want ≥ 12", hours)
	}
}
