package online

import (
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"runtime"
	"strconv"
	"testing"
	"time"
)

// benchWorkload feeds seconds of 60 Hz binary noise with units spiking at
// about rate Hz each, some with fields, one Update per second.
type benchWorkload struct {
	m      *Mapper
	frames [][]float64
	counts [][]Count
}

func newBenchWorkload(b *testing.B, w, h, lags, units int, rate float64) *benchWorkload {
	m, err := NewMapper(Config{Width: w, Height: h, Lags: lags, White: true, PixelVariance: 1, NoPrior: benchNoPrior, PriorWorkers: benchPriorWorkers})
	if err != nil {
		b.Fatal(err)
	}
	// Close the mapper's background prior fits when the benchmark ends, or
	// they would go on beside the next run's updates.
	b.Cleanup(m.Close)
	rng := rand.New(rand.NewPCG(11, 12))
	for u := range units {
		m.Unit("u" + strconv.Itoa(u))
	}
	// One second of frames and counts, replayed; the estimator cannot tell.
	bw := &benchWorkload{m: m}
	for range 60 {
		f := make([]float64, w*h)
		binaryFrame(rng, f)
		bw.frames = append(bw.frames, f)
		var c []Count
		for u := range units {
			if n := poisson(rng, rate/60); n > 0 {
				c = append(c, Count{Unit: u, N: n})
			}
		}
		bw.counts = append(bw.counts, c)
	}
	// Warm up: fill the lag history and a first update.
	bw.second()
	m.Update()
	return bw
}

func (bw *benchWorkload) second() {
	for i, f := range bw.frames {
		bw.m.AddBin(f, bw.counts[i])
	}
}

// settle waits for the folds that AddBin hands to goroutines of their own
// (a full batch of the STA's cross sums, a chunk of the Gram's pair counts).
// On a live stream they run while the next bins arrive, long before the
// second's update; here the 60 bins come at once, and without the wait
// that ingest work would be timed as part of the update (it was inside
// AddBin before it moved to the background; the ingest benchmarks time it).
func (bw *benchWorkload) settle() {
	bw.m.sta.folding.Wait()
	bw.m.gram.counting.Wait()
}

// run times b.N seconds of data, each 60 bins and one Update, and reports
// the real-time factor and the memory.
func (bw *benchWorkload) run(b *testing.B) {
	b.ReportAllocs()
	b.ResetTimer()
	start := time.Now()
	var fold, update float64
	for range b.N {
		bw.second()
		bw.settle()
		t := time.Now()
		fold += bw.m.Update().Solve.Seconds
		update += time.Since(t).Seconds()
	}
	reportRealtime(b, start, bw)
	// update-s is the mean time of one Update (the per-second update
	// itself, without the 60 AddBin calls of its second).
	b.ReportMetric(update/float64(b.N), "update-s")
	// fold-share is the part of the time spent folding the bins into the
	// ridge (the block update); the rest is AddBin and the per-unit work.
	b.ReportMetric(fold/time.Since(start).Seconds(), "fold-share")
}

func reportRealtime(b *testing.B, start time.Time, bw *benchWorkload) {
	perSecond := time.Since(start).Seconds() / float64(b.N)
	b.ReportMetric(1/perSecond, "x-realtime")
	// MB-live is what the mapper holds (the heap after a collection);
	// MB-sys what the process has taken from the system so far, garbage
	// between collections included.
	var ms runtime.MemStats
	runtime.GC()
	runtime.ReadMemStats(&ms)
	b.ReportMetric(float64(ms.HeapAlloc)/(1<<20), "MB-live")
	b.ReportMetric(float64(ms.Sys)/(1<<20), "MB-sys")
	runtime.KeepAlive(bw)
}

// BenchmarkReferenceWorkload is the complete per-second update (60 bins of
// STA and ridge rows, then the block RLS update, confidence, reliability,
// features and the block summary) at the reference workload: binary noise
// 16×16 at 60 Hz, 12 lags (D = 3072), 384 units at 10 spikes/s.
// x-realtime is seconds of data per second of compute.
func BenchmarkReferenceWorkload(b *testing.B) {
	newBenchWorkload(b, 16, 16, 12, 384, 10).run(b)
}

// BenchmarkUpdateScaling shows how the per-second cost grows with the
// dimension D and with the number of units.
func BenchmarkUpdateScaling(b *testing.B) {
	for _, c := range []struct{ side, lags, units int }{
		{8, 12, 384}, {12, 12, 384}, {16, 12, 384},
		{16, 12, 96}, {16, 12, 768},
	} {
		b.Run(fmt.Sprintf("D=%d/units=%d", c.side*c.side*c.lags, c.units), func(b *testing.B) {
			newBenchWorkload(b, c.side, c.side, c.lags, c.units, 10).run(b)
		})
	}
}

// TestAddBinDoesNotAllocate guards the per-bin path.
func TestAddBinDoesNotAllocate(t *testing.T) {
	m, err := NewMapper(Config{Width: 8, Height: 8, Lags: 4, White: true, PixelVariance: 1})
	if err != nil {
		t.Fatal(err)
	}
	for u := range 20 {
		m.Unit("u" + strconv.Itoa(u))
	}
	frame := make([]float64, 64)
	counts := []Count{{Unit: 3, N: 1}, {Unit: 17, N: 2}}
	for range 200 {
		m.AddBin(frame, counts)
	}
	m.Update()
	allocs := testing.AllocsPerRun(50, func() {
		for i := range frame {
			frame[i] = math.Copysign(1, float64(i%3)-1)
		}
		m.AddBin(frame, counts)
	})
	if allocs != 0 {
		t.Errorf("AddBin allocated %.1f times per bin, want 0", allocs)
	}
	// Past the bin log's limit the log is dropped (the next Update
	// re-solves); adding bins still does not allocate.
	m.log.limit = 10
	if allocs := testing.AllocsPerRun(50, func() { m.AddBin(frame, counts) }); allocs != 0 || !m.log.dropped {
		t.Errorf("with the log dropped (%v), AddBin allocated %.1f times per bin, want 0", m.log.dropped, allocs)
	}
	if s := m.Update(); s.Solve.Route != RouteResolve || m.Folded() != m.Bins() {
		t.Errorf("after the log overflowed: route %q, %d of %d bins folded", s.Solve.Route, m.Folded(), m.Bins())
	}
}

// BenchmarkAddBin is the message path alone at the reference workload
// (16×16 binary noise at 60 Hz, 12 lags, 384 units at 10 spikes/s): one
// second of bins per iteration, the bin log emptied between seconds as
// Update would (outside the timing). Run it on one core, as the target
// (≥ 50× real time) is stated: -cpu 1.
func BenchmarkAddBin(b *testing.B) {
	bw := newBenchWorkload(b, 16, 16, 12, 384, 10)
	m := bw.m
	b.ReportAllocs()
	b.ResetTimer()
	var busy time.Duration
	for range b.N {
		start := time.Now()
		bw.second()
		busy += time.Since(start)
		b.StopTimer()
		m.log.start(m.ringHistory())
		b.StartTimer()
	}
	b.ReportMetric(float64(b.N)/busy.Seconds(), "x-realtime")
}

// BenchmarkReferenceCatchUp is a backlog at the reference workload: 300 s of
// bins arrive with no Update between them (a restart mid-block, a full-speed
// replay), then one Update folds them all. The cost model picks the re-solve
// from the sufficient statistics; s-update is that Update's time, s-fold the
// re-solve's part of it, and MB-live the heap after it.
func BenchmarkReferenceCatchUp(b *testing.B) {
	const seconds = 300
	for range b.N {
		b.StopTimer()
		bw := newBenchWorkload(b, 16, 16, 12, 384, 10)
		for range seconds {
			bw.second()
		}
		b.StartTimer()
		start := time.Now()
		snap := bw.m.Update()
		b.ReportMetric(time.Since(start).Seconds(), "s-update")
		b.ReportMetric(snap.Solve.Seconds, "s-fold")
		if snap.Solve.Route != RouteResolve || bw.m.Folded() != bw.m.Bins() {
			b.Fatalf("route %s, %d of %d bins folded", snap.Solve.Route, bw.m.Folded(), bw.m.Bins())
		}
		var ms runtime.MemStats
		runtime.GC()
		runtime.ReadMemStats(&ms)
		b.ReportMetric(float64(ms.HeapAlloc)/(1<<20), "MB-live")
		b.ReportMetric(float64(ms.Sys)/(1<<20), "MB-sys")
		runtime.KeepAlive(bw)
	}
}

var benchNoPrior = os.Getenv("NOPRIOR") != ""

// benchPriorWorkers sets Config.PriorWorkers from PRIORWORKERS (0, the
// default, when unset).
var benchPriorWorkers, _ = strconv.Atoi(os.Getenv("PRIORWORKERS"))
