package online

import (
	"errors"
	"math"
	"sync/atomic"
	"testing"
	"time"
)

// TestPriorEvaluationPauses checks that an evidence evaluation asked to
// pause gives up with errPaused, and that the evaluation redone afterwards
// gives the dense numpy reference's log evidence
// (testdata/golden/prior_golden.py, as TestPriorEvidenceGolden, 1e-8
// relative): a pause costs time, never a wrong value.
func TestPriorEvaluationPauses(t *testing.T) {
	g := loadPriorGolden(t)
	v, cross, q := goldenStats(t, g)
	c := g.Fixed[0]
	p := goldenProblem(v, cross, q, g, c.Window)
	var pause atomic.Bool
	p.pause = &pause
	pause.Store(true)
	if _, err := p.evaluate(c.Hyper, false); !errors.Is(err, errPaused) {
		t.Fatalf("paused evaluation: error %v, want errPaused", err)
	}
	pause.Store(false)
	ev, err := p.evaluate(c.Hyper, false)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(ev.logEv-c.LogEvidence) > 1e-8*math.Abs(c.LogEvidence) {
		t.Fatalf("after a pause: log evidence %.15g, numpy %.15g", ev.logEv, c.LogEvidence)
	}
}

// TestPriorRefitThroughPauses runs a refit on a gated fitter while the gate
// is closed and opened over and over (as updates do), and checks that it
// gives the same fit, bit for bit, as an ungated fitter on the same data:
// paused evaluations are redone from their start.
func TestPriorRefitThroughPauses(t *testing.T) {
	g := loadPriorGolden(t)
	v, cross, q := goldenStats(t, g)
	seed := append([]float64(nil), cross...)
	st := PriorStats{Gram: v, Cross: cross, YY: q, Seed: seed}
	opt := PriorOptions{WindowPixels: 5, WindowLags: 3}
	plain, err := NewPriorFitter(g.Width, g.Height, g.Lags, opt)
	if err != nil {
		t.Fatal(err)
	}
	want, err := plain.Refit(0, st)
	if err != nil {
		t.Fatal(err)
	}

	gate := new(updateGate)
	stop := make(chan struct{})
	toggled := make(chan int)
	go func() {
		n := 0
		for {
			select {
			case <-stop:
				toggled <- n
				return
			default:
			}
			gate.close()
			n++
			time.Sleep(20 * time.Microsecond)
			gate.open()
			time.Sleep(20 * time.Microsecond)
		}
	}()
	// Several refits, so that pauses fall at many points of the search.
	for range 10 {
		gated, err := NewPriorFitter(g.Width, g.Height, g.Lags, opt)
		if err != nil {
			t.Fatal(err)
		}
		gated.gate = gate
		got, err := gated.Refit(0, st)
		if err != nil {
			t.Fatal(err)
		}
		if got.LogEvidence != want.LogEvidence || got.Hyper != want.Hyper || got.Evaluations != want.Evaluations {
			t.Fatalf("log evidence %v, hyper %+v, %d evaluations; ungated %v, %+v, %d",
				got.LogEvidence, got.Hyper, got.Evaluations, want.LogEvidence, want.Hyper, want.Evaluations)
		}
		for i := range want.Weights {
			if got.Weights[i] != want.Weights[i] {
				t.Fatalf("weight %d %v, ungated %v", i, got.Weights[i], want.Weights[i])
			}
		}
	}
	close(stop)
	n := <-toggled
	if redone := gate.redone.Load(); redone == 0 {
		t.Fatalf("%d pauses, none fell inside an evaluation: the test did not test", n)
	} else {
		t.Logf("%d pauses, %d evaluations redone", n, redone)
	}
}
