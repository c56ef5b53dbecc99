package ingest

import (
	"fmt"
	"strconv"
	"strings"
)

// Shard is one worker's share of a rig's units: the units whose ShardOf
// is Index, of Count workers. The zero Shard (and Count 1) takes every
// unit. Every worker still reads every frame, block and control message.
type Shard struct {
	Index, Count int
}

// ParseShard reads "i/n" (0 ≤ i < n), e.g. "0/2".
func ParseShard(s string) (Shard, error) {
	a, b, ok := strings.Cut(s, "/")
	i, err1 := strconv.Atoi(a)
	n, err2 := strconv.Atoi(b)
	if !ok || err1 != nil || err2 != nil {
		return Shard{}, fmt.Errorf("ingest: shard %q is not i/n (e.g. 0/2)", s)
	}
	sh := Shard{Index: i, Count: n}
	if n < 1 {
		return Shard{}, fmt.Errorf("ingest: shard %d/%d: want 0 ≤ i < n", i, n)
	}
	if err := sh.check(); err != nil {
		return Shard{}, err
	}
	return sh, nil
}

func (s Shard) check() error {
	if s.Count == 0 && s.Index == 0 {
		return nil
	}
	if s.Count < 1 || s.Index < 0 || s.Index >= s.Count {
		return fmt.Errorf("ingest: shard %d/%d: want 0 ≤ i < n", s.Index, s.Count)
	}
	return nil
}

// String is "i/n" ("0/1" for the zero Shard).
func (s Shard) String() string {
	if s.Count <= 1 {
		return "0/1"
	}
	return strconv.Itoa(s.Index) + "/" + strconv.Itoa(s.Count)
}

// Has reports whether the unit id belongs to this shard.
func (s Shard) Has(id string) bool { return s.Count <= 1 || ShardOf(id, s.Count) == s.Index }

// ShardOf is the shard of a unit id among n workers: the 32-bit FNV-1a
// hash of the id's bytes (offset basis 2166136261, prime 16777619, each
// byte XORed in then multiplied) modulo n. Any FNV-1a-32 implementation
// gives the same, e.g. Go's hash/fnv New32a or, in Python,
// h = 2166136261; for b in id.encode(): h = ((h ^ b) * 16777619) % 2**32.
func ShardOf(id string, n int) int {
	if n <= 1 {
		return 0
	}
	h := uint32(2166136261)
	for i := 0; i < len(id); i++ {
		h ^= uint32(id[i])
		h *= 16777619
	}
	return int(h % uint32(n))
}
