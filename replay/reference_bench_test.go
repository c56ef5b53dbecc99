package replay

import (
	"cmp"
	"encoding/json"
	"math/rand/v2"
	"os"
	"slices"
	"strconv"
	"testing"
	"time"

	"livefield/replay/session"
	"livefield/stream/wire"
)

// referenceSession encodes seconds of the reference workload (16×16 binary
// noise at 60 Hz, 12 lags, 384 units firing at 10 spikes/s) as the records a
// recorder would have written: frames every 50 ms, spikes every 20 ms.
func referenceSession(b testing.TB, seconds float64) []session.Record {
	const units, rate, period = 384, 10.0, 1.0 / 60
	rng := rand.New(rand.NewPCG(5, 6))
	t0 := time.Unix(1_700_000_000, 0)
	at := func(t float64) time.Time { return t0.Add(time.Duration(t * float64(time.Second))) }
	start, err := wire.EncodeBlock(wire.Block{Kind: wire.KindStart, Block: "ref", T: 0, Lags: 12, FramePeriod: period,
		Stimulus: json.RawMessage(`{"type":"binary","width":16,"height":16,"seed":9}`)})
	if err != nil {
		b.Fatal(err)
	}
	recs := []session.Record{{At: at(0), Subject: wire.SubjectBlock, Data: start}}
	ids := make([]string, units)
	for u := range ids {
		ids[u] = "u" + strconv.Itoa(u)
	}
	frame := int64(0)
	type spike struct {
		t float64
		u string
	}
	var batch []spike
	for t := 0.02; t <= seconds+1e-9; t += 0.02 {
		batch = batch[:0]
		for _, id := range ids {
			for s := t - 0.02 + rng.ExpFloat64()/rate; s < t; s += rng.ExpFloat64() / rate {
				batch = append(batch, spike{s, id})
			}
		}
		slices.SortFunc(batch, func(a, b spike) int { return cmp.Compare(a.t, b.t) })
		var sp wire.Spikes
		for _, s := range batch {
			sp.Unit, sp.T = append(sp.Unit, s.u), append(sp.T, s.t)
		}
		if int(t*50+0.5)%5 == 0 { // frames every 50 ms, ahead of the spikes
			var fr wire.Frames
			fr.Block = "ref"
			for ; float64(frame)*period < t; frame++ {
				fr.Index, fr.T = append(fr.Index, frame), append(fr.T, float64(frame)*period)
			}
			data, err := wire.EncodeFrames(fr)
			if err != nil {
				b.Fatal(err)
			}
			recs = append(recs, session.Record{At: at(t), Subject: wire.SubjectFrames, Data: data})
		}
		data, err := wire.EncodeSpikes(sp)
		if err != nil {
			b.Fatal(err)
		}
		recs = append(recs, session.Record{At: at(t + 0.005), Subject: wire.SubjectSpikes, Data: data})
	}
	end, _ := wire.EncodeBlock(wire.Block{Kind: wire.KindEnd, Block: "ref", T: seconds})
	return append(recs, session.Record{At: at(seconds + 0.01), Subject: wire.SubjectBlock, Data: end})
}

// BenchmarkReplayReference feeds a recorded reference-workload session to
// the mapper at full speed, updating the estimates every second of session
// time (as live) or only at the block end (FinalOnly, as `replay --speed
// max` and export do), and
// reports seconds of session per second of compute. The session is 120 s
// long; set LIVEFIELD_REPLAY_SECONDS=1800 for the 30-minute block.
func BenchmarkReplayReference(b *testing.B) {
	seconds := 120.0
	if v, err := strconv.ParseFloat(os.Getenv("LIVEFIELD_REPLAY_SECONDS"), 64); err == nil && v > 0 {
		seconds = v
	}
	recs := referenceSession(b, seconds)
	for _, c := range []struct {
		name  string
		every time.Duration
	}{{"update=1s", time.Second}, {"update=final", FinalOnly}} {
		every := c.every
		b.Run(c.name, func(b *testing.B) {
			b.ReportAllocs()
			start := time.Now()
			for range b.N {
				f, err := NewFeeder(FeedOptions{UpdateEvery: every})
				if err != nil {
					b.Fatal(err)
				}
				for _, r := range recs {
					if err := f.FeedRecord(r); err != nil {
						b.Fatal(err)
					}
				}
				if s := f.Finish(); s == nil || len(s.Units) != 384 {
					b.Fatalf("final snapshot has %v units, want 384", s)
				}
			}
			b.ReportMetric(seconds*float64(b.N)/time.Since(start).Seconds(), "x-realtime")
		})
	}
}

// TestWriteReferenceSession writes the reference-workload session to the
// file named by LIVEFIELD_REFERENCE_SESSION (LIVEFIELD_REPLAY_SECONDS long,
// 1800 s by default), for timing `livefield export` on it by hand against
// testdata/golden/numpy_batch_ridge.py. Skipped unless the variable is set.
func TestWriteReferenceSession(t *testing.T) {
	path := os.Getenv("LIVEFIELD_REFERENCE_SESSION")
	if path == "" {
		t.Skip("set LIVEFIELD_REFERENCE_SESSION=FILE to write the reference session")
	}
	seconds := 1800.0
	if v, err := strconv.ParseFloat(os.Getenv("LIVEFIELD_REPLAY_SECONDS"), 64); err == nil && v > 0 {
		seconds = v
	}
	w, err := session.Create(path, session.Header{Rig: "ref", Prefix: "livefield.ref", Created: time.Unix(1_700_000_000, 0).UTC()})
	if err != nil {
		t.Fatal(err)
	}
	for _, r := range referenceSession(t, seconds) {
		if err := w.Write(r); err != nil {
			t.Fatal(err)
		}
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
}
