package ingest

import (
	"math"
	"os"
	"path/filepath"
	"strconv"
	"testing"
	"time"

	"livefield/online"
	"livefield/stream/npy"
	"livefield/stream/stimulus"
	"livefield/stream/wire"
)

// TestCriterionOfOneThenBlock: a criterion with target 1 is refused whole
// (a reliability of 1 is out of reach), counted under bad-criterion, and
// the next block start is accepted with the criterion in force before.
func TestCriterionOfOneThenBlock(t *testing.T) {
	l, err := NewLoop(Options{Logger: quiet()})
	if err != nil {
		t.Fatal(err)
	}
	defer l.Close()
	at := time.Unix(100, 0)
	err = l.Feed("control", []byte(`{"command":"criterion","target":1,"fraction":0.5}`), at)
	if e, ok := err.(*Error); !ok || e.Reason != wire.ReasonBadCriterion {
		t.Fatalf("criterion target 1: %v, want a %s refusal", err, wire.ReasonBadCriterion)
	}
	if err := l.SetCriterion(1, 0.5); err == nil {
		t.Fatal("SetCriterion(1, 0.5) accepted")
	}
	if err := l.Feed("block", []byte(`{"kind":"start","block":"b1","t":0,"lags":2,"stimulus":{"type":"binary","width":4,"height":4,"seed":1}}`), at); err != nil {
		t.Fatalf("block start after a refused criterion: %v", err)
	}
	h := l.Health()
	if h.BlockState != "running" || h.Rejected[ReasonBadConfig] != 0 {
		t.Fatalf("block %q %s, rejected %v; want b1 running", h.Block, h.BlockState, h.Rejected)
	}
	if s := l.Snapshot(); s == nil || s.Summary.Target != 0.9 || s.Summary.Fraction != 0.8 {
		t.Fatalf("snapshot criterion %+v, want the default 0.9 / 0.8", s)
	}
}

// TestNonFiniteMoviePixel: a movie frame with a NaN pixel makes its bins
// refused by the estimator; they are counted under bad-bin, left out of
// the bin count, and the other bins are used.
func TestNonFiniteMoviePixel(t *testing.T) {
	dir := t.TempDir()
	const w, h, frames = 4, 4, 40
	data := make([]float64, frames*w*h)
	for i := range data {
		data[i] = float64((i*7)%5) - 2
	}
	data[10*w*h+3] = math.NaN() // frame 10
	f, err := os.Create(filepath.Join(dir, "m.npy"))
	if err != nil {
		t.Fatal(err)
	}
	if err := npy.Write(f, []int{frames, h, w}, data); err != nil {
		t.Fatal(err)
	}
	f.Close()
	l, err := NewLoop(Options{Logger: quiet(), StimuliDir: dir})
	if err != nil {
		t.Fatal(err)
	}
	defer l.Close()
	at := time.Unix(100, 0)
	feed := func(subject, msg string) {
		t.Helper()
		if err := l.Feed(subject, []byte(msg), at); err != nil {
			t.Fatalf("%s %s: %v", subject, msg, err)
		}
	}
	feed("block", `{"kind":"start","block":"m","t":0,"lags":2,"frame_period":0.1,"stimulus":{"type":"movie","file":"m.npy"}}`)
	for i := range 20 {
		feed("frames", `{"block":"m","index":[`+itoa(i)+`],"t":[`+ftoa(0.1*float64(i))+`]}`)
		feed("spikes", `{"unit":["a"],"t":[`+ftoa(0.1*float64(i)+0.05)+`]}`)
	}
	feed("block", `{"kind":"end","block":"m","t":2}`)
	l.Finish(at)
	c := l.Health()
	if c.Rejected[ReasonBadBin] != 1 {
		t.Fatalf("rejected %v, want one %s", c.Rejected, ReasonBadBin)
	}
	if c.Bins != 19 {
		t.Fatalf("%d bins in the estimates, want 19 (20 less the refused one)", c.Bins)
	}
}

func itoa(i int) string     { return strconv.Itoa(i) }
func ftoa(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }

// TestOneSetOfSizeLimits: the wire decoder, the stimulus specs and the
// mapper refuse sizes at the same bounds, so that nothing the wire accepts
// is refused later as bad-config for its lags or frame size alone.
func TestOneSetOfSizeLimits(t *testing.T) {
	if wire.MaxLags != online.MaxLags {
		t.Errorf("wire.MaxLags %d, online.MaxLags %d", wire.MaxLags, online.MaxLags)
	}
	if stimulus.MaxPixels != online.MaxPixels {
		t.Errorf("stimulus.MaxPixels %d, online.MaxPixels %d", stimulus.MaxPixels, online.MaxPixels)
	}
}
