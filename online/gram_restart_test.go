package online

import (
	"math"
	"math/rand/v2"
	"testing"

	"livefield/replay/synth"
)

// denseWindowGram is the reference for a restarted lag history: the
// centred XᵀX over the window idx, built row by row from the plain
// definition (x_k = [s_k; s_{k−1}; …] for the bins k of each segment with a
// full history inside that segment, no bin spanning two segments), and the
// mean lagged stimulus over those bins. Nothing of LagGram is used.
func denseWindowGram(segments [][][]float64, lags int, idx []int) (gram []float64, mean []float64, bins int) {
	k := len(idx)
	p := len(segments[0][0])
	var rows [][]float64
	for _, seg := range segments {
		for b := lags - 1; b < len(seg); b++ {
			row := make([]float64, k)
			for c, a := range idx {
				row[c] = seg[b-a/p][a%p]
			}
			rows = append(rows, row)
		}
	}
	mean = make([]float64, k)
	for _, row := range rows {
		for c, v := range row {
			mean[c] += v / float64(len(rows))
		}
	}
	gram = make([]float64, k*k)
	for _, row := range rows {
		for r := range k {
			for c := range k {
				gram[r*k+c] += (row[r] - mean[r]) * (row[c] - mean[c])
			}
		}
	}
	return gram, mean, len(rows)
}

// checkWindowGram compares a view's centred window Gram and mean with the
// dense reference, to 1e-10 relative to the largest entry.
func checkWindowGram(t *testing.T, what string, v *GramView, segments [][][]float64, lags int, idx []int) {
	t.Helper()
	want, mean, bins := denseWindowGram(segments, lags, idx)
	if v.Bins() != bins {
		t.Fatalf("%s: view of %d bins, want %d", what, v.Bins(), bins)
	}
	got := make([]float64, len(idx)*len(idx))
	if err := v.WindowTo(got, idx); err != nil {
		t.Fatal(err)
	}
	scale := 0.0
	for _, w := range want {
		scale = math.Max(scale, math.Abs(w))
	}
	for i := range got {
		if math.Abs(got[i]-want[i]) > 1e-10*scale {
			t.Fatalf("%s: window Gram entry %d = %.12g, dense %.12g", what, i, got[i], want[i])
		}
	}
	for c, a := range idx {
		if math.Abs(v.Mean()[a]-mean[c]) > 1e-12 {
			t.Fatalf("%s: mean[%d] = %.15g, dense %.15g", what, a, v.Mean()[a], mean[c])
		}
	}
}

// TestGramViewRestart checks that a view of a restarted lag history covers
// every segment exactly: its window Gram matrix and mean equal the dense
// ones built from the used bins of the segments (denseWindowGram), on both
// accumulation routes, right after a restart (no used bin yet in the new
// segment) and with a segment too short to have any; and that a view taken
// earlier is not changed by later frames and restarts.
func TestGramViewRestart(t *testing.T) {
	const pixels, lags = 6, 4
	rng := rand.New(rand.NewPCG(7, 11))
	binary := func() []float64 {
		f := make([]float64, pixels)
		for i := range f {
			f[i] = float64(2*rng.IntN(2) - 1)
		}
		return f
	}
	gauss := func() []float64 {
		f := make([]float64, pixels)
		for i := range f {
			f[i] = rng.NormFloat64()
		}
		return f
	}
	g, err := NewLagGram(pixels, lags)
	if err != nil {
		t.Fatal(err)
	}
	// Every coefficient: all lags, all pixels.
	idx := make([]int, pixels*lags)
	for i := range idx {
		idx[i] = i
	}
	var segments [][][]float64
	var early *GramView
	var earlySegments [][][]float64
	for s, seg := range []struct {
		frames int
		frame  func() []float64
	}{{1500, binary}, {2, binary}, {700, binary}, {300, gauss}, {lags, binary}} {
		if s > 0 {
			g.Restart()
			v, err := g.View()
			if err != nil {
				t.Fatal(err)
			}
			checkWindowGram(t, "right after a restart", v, segments, lags, idx)
		}
		var frames [][]float64
		for range seg.frames {
			f := seg.frame()
			frames = append(frames, f)
			if err := g.AddFrame(f); err != nil {
				t.Fatal(err)
			}
		}
		segments = append(segments, frames)
		v, err := g.View()
		if err != nil {
			t.Fatal(err)
		}
		checkWindowGram(t, "after a segment", v, segments, lags, idx)
		if s == 2 {
			early, earlySegments = v, append([][][]float64(nil), segments...)
		}
	}
	checkWindowGram(t, "an earlier view at the end", early, earlySegments, lags, idx)
}

// TestMapperPriorAfterRestart checks that the live prior goes on after a
// restarted lag history (a refused bin mid-block): the mapper's Gram view
// covers every used bin (its window Gram equals the dense one built from
// the frames the test fed, denseWindowGram), and the prior keeps refitting
// on all of them.
func TestMapperPriorAfterRestart(t *testing.T) {
	sc := synth.Scenario{Seed: 3, Units: 4, MeanRate: 16, Gain: 1.5, Width: 8, Height: 8, Lags: 6}
	c := newCortexRun(t, sc, Config{PriorInline: PriorInlineAll, Prior: PriorOptions{WindowPixels: 5, WindowLags: 4}})
	before := c.seconds(20)
	// The frames fed so far, segment one.
	frames := func(from, to int64) [][]float64 {
		var out [][]float64
		for k := from; k < to; k++ {
			f := make([]float64, sc.Width*sc.Height)
			if err := c.src.FrameTo(f, k); err != nil {
				t.Fatal(err)
			}
			out = append(out, f)
		}
		return out
	}
	cut := c.k
	if err := c.m.AddBin(make([]float64, 3), nil); err == nil {
		t.Fatal("a frame of the wrong size was accepted")
	}
	after := c.seconds(20)
	segments := [][][]float64{frames(0, cut), frames(cut, c.k)}
	v, err := c.m.gram.View()
	if err != nil {
		t.Fatalf("no Gram view after a restart: %v", err)
	}
	w := PriorWindow{X0: 2, Y0: 1, T0: 1, NX: 3, NY: 4, NT: 3}
	checkWindowGram(t, "mapper", v, segments, sc.Lags, w.Indices(sc.Width, sc.Height))
	fitted := 0
	for _, u := range after.Units {
		d, _ := after.Detail(u.ID)
		d0, _ := before.Detail(u.ID)
		if d0.Prior == nil {
			continue
		}
		fitted++
		if d.PriorBins != after.Bins {
			t.Errorf("unit %s: prior on %d bins after the restart, want all %d (before it %d)", u.ID, d.PriorBins, after.Bins, d0.PriorBins)
		}
	}
	if fitted == 0 {
		t.Fatal("no unit had a prior fit before the restart")
	}
}
