package main

import (
	"context"
	"os"
	"runtime/debug"
	"runtime/metrics"
	"time"
)

// Memory policy, unless GOGC or GOMEMLIMIT say otherwise.
//
// The estimates' state is mostly large pointer-free arrays (the RLS
// inverse, the STA sums, the snapshots' per-unit maps), cheap for the
// collector to mark, while each update leaves about a snapshot's worth of
// garbage. Go's default (collect when the heap has doubled) would let a
// process at the reference workload (16×16 pixels, 12 lags, 384 units;
// about 300 MB live) grow past 550 MB. livefield collects when the heap
// has grown by half (gcPercent), and keeps a soft limit of memoryFloor or
// memoryHeadroom times the live heap, whichever is larger, re-read every
// memoryEvery: the collector then returns memory to the system sooner and
// the process stays near 350 MB there (README, "Speed and memory"), while a
// larger workload raises the limit with its live heap instead of making
// the collector run without pause.
const (
	gcPercent      = 50
	memoryFloor    = 360 << 20
	memoryHeadroom = 1.2
	memoryEvery    = 2 * time.Second
)

// governMemory applies the policy until ctx is done.
func governMemory(ctx context.Context) {
	if os.Getenv("GOGC") == "" {
		debug.SetGCPercent(gcPercent)
	}
	if os.Getenv("GOMEMLIMIT") != "" {
		return
	}
	setLimit := func() {
		s := []metrics.Sample{{Name: "/gc/heap/live:bytes"}}
		metrics.Read(s)
		var live float64
		if s[0].Value.Kind() == metrics.KindUint64 {
			live = float64(s[0].Value.Uint64())
		}
		debug.SetMemoryLimit(int64(max(memoryFloor, memoryHeadroom*live)))
	}
	setLimit()
	go func() {
		t := time.NewTicker(memoryEvery)
		defer t.Stop()
		for {
			select {
			case <-ctx.Done():
				return
			case <-t.C:
				setLimit()
			}
		}
	}()
}
