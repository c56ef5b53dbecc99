package ingest

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"livefield/stream/wire"
)

// The ridge penalty given to the ingest reaches every block's estimator;
// without one the estimator's default (100 × the pixel variance of binary
// noise of contrast 1) holds.
func TestLambdaOption(t *testing.T) {
	for _, c := range []struct {
		lambda, want float64
	}{{0, 100}, {37, 37}} {
		l, err := NewLoop(Options{Lambda: c.lambda, Logger: quiet()})
		if err != nil {
			t.Fatal(err)
		}
		at := time.Date(2026, 5, 1, 9, 0, 0, 0, time.UTC)
		if err := l.Feed("block", []byte(`{"kind":"start","block":"B1","t":0,"stimulus":{"type":"binary","width":4,"height":4,"seed":1}}`), at); err != nil {
			t.Fatal(err)
		}
		if got := float64(l.Snapshot().Lambda); got != c.want {
			t.Errorf("Options.Lambda %v: the block's λ is %v, want %v", c.lambda, got, c.want)
		}
	}
	if _, err := NewLoop(Options{Lambda: -1}); err == nil {
		t.Error("a negative λ was accepted")
	}
}

// With Options.Evidence the penalty is chosen by the evidence at the end of
// a block and given to the next block of the same stimulus shape; a block
// of another shape keeps the default.
func TestEvidenceLambdaCarriesOver(t *testing.T) {
	l, err := NewLoop(Options{Evidence: true, Logger: quiet()})
	if err != nil {
		t.Fatal(err)
	}
	at := time.Date(2026, 5, 1, 9, 0, 0, 0, time.UTC)
	start := func(block string, side int) {
		t.Helper()
		msg := fmt.Sprintf(`{"kind":"start","block":%q,"t":0,"lags":3,"stimulus":{"type":"binary","width":%d,"height":%d,"seed":4}}`, block, side, side)
		if err := l.Feed("block", []byte(msg), at); err != nil {
			t.Fatal(err)
		}
	}
	start("B1", 4)
	rng := rand.New(rand.NewPCG(3, 4))
	const period = 1.0 / 60
	for k := range 1200 { // 20 s of frames, spikes of three units in between
		f := wire.Frames{Block: "B1", Index: []int64{int64(k)}, T: []float64{float64(k) * period}}
		data, _ := wire.EncodeFrames(f)
		if err := l.Feed("frames", data, at); err != nil {
			t.Fatal(err)
		}
		var s wire.Spikes
		for u := range 3 {
			if rng.Float64() < 0.2 {
				s.Unit = append(s.Unit, fmt.Sprint("u", u))
				s.T = append(s.T, (float64(k)+0.5)*period)
			}
		}
		data, _ = wire.EncodeSpikes(s)
		if err := l.Feed("spikes", data, at); err != nil {
			t.Fatal(err)
		}
	}
	if err := l.Feed("block", []byte(`{"kind":"end","block":"B1","t":20}`), at.Add(time.Second)); err != nil {
		t.Fatal(err)
	}
	l.WaitEvidence()
	h := l.Health()
	lambda := float64(h.EvidenceLambda)
	if !(lambda > 0) || math.IsInf(lambda, 0) || h.EvidenceBlock != "B1" || h.EvidenceError != "" {
		t.Fatalf("evidence after B1: λ %v from %q, error %q", lambda, h.EvidenceBlock, h.EvidenceError)
	}
	start("B2", 4)
	if got := float64(l.Snapshot().Lambda); got != lambda {
		t.Errorf("B2 (same shape) has λ %v, want the evidence choice %v", got, lambda)
	}
	start("B3", 5)
	if got := float64(l.Snapshot().Lambda); got != 100 {
		t.Errorf("B3 (another shape) has λ %v, want the default 100", got)
	}
}
