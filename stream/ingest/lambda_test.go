package ingest

import (
	"testing"
	"time"
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
