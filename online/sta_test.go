package online

import (
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"slices"
	"testing"
)

// staGoldenFile is testdata/golden/sta_golden.json, written by sta_golden.py
// (numpy, computed from the dense arrays).
type staGoldenFile struct {
	Pixels   int         `json:"pixels"`
	Lags     int         `json:"lags"`
	Frames   [][]float64 `json:"frames"`
	HalfA    []bool      `json:"half_a"`
	Counts   [][]float64 `json:"counts"`
	STA      [][]float64 `json:"sta"`
	HalfASTA [][]float64 `json:"half_a_sta"`
	HalfBSTA [][]float64 `json:"half_b_sta"`
	Cross    [][]float64 `json:"cross"`
	Autocov  [][]float64 `json:"autocov"`
}

// staLoadJSON decodes the golden file testdata/golden/name into v.
func staLoadJSON(t *testing.T, name string, v any) {
	t.Helper()
	b, err := os.ReadFile("../testdata/golden/" + name)
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, v); err != nil {
		t.Fatalf("%s: %v", name, err)
	}
}

// staLagged writes x = [s_k; s_{k−1}; …] (lag-major) from frames.
func staLagged(x []float64, frames [][]float64, k, lags int) {
	p := len(frames[0])
	for t := 0; t < lags; t++ {
		copy(x[t*p:(t+1)*p], frames[k-t])
	}
}

func staCloseTo(t *testing.T, what string, got, want []float64, tol float64) {
	t.Helper()
	if len(got) != len(want) {
		t.Fatalf("%s: len %d, want %d", what, len(got), len(want))
	}
	for i := range got {
		if d := math.Abs(got[i] - want[i]); d > tol*(1+math.Abs(want[i])) {
			t.Fatalf("%s[%d] = %.15g, want %.15g (numpy)", what, i, got[i], want[i])
		}
	}
}

// TestSTAGolden compares the running sums with numpy's direct computation
// (testdata/golden/sta_golden.py). Unit 2's counts are fed split in two
// entries per bin, units in reverse order, to check that counts add. The
// 78 bins fit in one batch of the cross sums; the other cases cut them into
// batches of 16 and of 1 bin, and fold a partial batch by a read in the
// middle of the stream. The frames are two-level (0.75 and −0.25): the
// cases run with the default route (every unit's spikes as integer
// counts) and with a unit's half of fewer than 5 bins with spikes by
// multiply-adds (minBins 5).
func TestSTAGolden(t *testing.T) {
	for _, tc := range []struct {
		name   string
		batch  int
		readAt int // bin before which CrossTo is called (−1: never)
	}{
		{"one batch", staBatchBins, -1},
		{"batches of 16", 16, -1},
		{"batches of 16, read at bin 41", 16, 41},
		{"bin by bin", 1, -1},
	} {
		for _, minBins := range []int{0, 5} {
			t.Run(fmt.Sprintf("%s/minBins %d", tc.name, minBins), func(t *testing.T) {
				staGoldenCase(t, tc.batch, tc.readAt, minBins)
			})
		}
	}
}

// TestSTAGoldenAnyOrder feeds the golden bins in a shuffled order: the
// cross sums do not depend on the order (numpy's values of
// testdata/golden/sta_golden.py still hold), and no bin's lagged row is the
// shift of the one before, so every bin starts a new batch of the fold.
func TestSTAGoldenAnyOrder(t *testing.T) {
	for _, minBins := range []int{0, 5} {
		t.Run(fmt.Sprintf("minBins %d", minBins), func(t *testing.T) { staGoldenAnyOrder(t, minBins) })
	}
}

func staGoldenAnyOrder(t *testing.T, minBins int) {
	var g staGoldenFile
	staLoadJSON(t, "sta_golden.json", &g)
	s := NewSTA(g.Pixels, g.Lags)
	s.fold.minBins = minBins
	D := g.Pixels * g.Lags
	x := make([]float64, D)
	order := rand.New(rand.NewPCG(3, 4)).Perm(len(g.HalfA))
	for _, k := range order {
		staLagged(x, g.Frames, k+g.Lags-1, g.Lags)
		var counts []Count
		for u := range g.Counts {
			if y := g.Counts[u][k]; y != 0 {
				counts = append(counts, Count{Unit: u, N: y})
			}
		}
		s.AddBin(x, g.HalfA[k], counts)
	}
	a, b := make([]float64, D), make([]float64, D)
	for u := range g.Counts {
		s.STATo(a, u)
		staCloseTo(t, fmt.Sprintf("STA unit %d", u), a, g.STA[u], 1e-12)
		s.HalvesTo(a, b, u)
		staCloseTo(t, fmt.Sprintf("half A unit %d", u), a, g.HalfASTA[u], 1e-12)
		staCloseTo(t, fmt.Sprintf("half B unit %d", u), b, g.HalfBSTA[u], 1e-12)
	}
}

func staGoldenCase(t *testing.T, batch, readAt, minBins int) {
	var g staGoldenFile
	staLoadJSON(t, "sta_golden.json", &g)
	s := NewSTA(g.Pixels, g.Lags)
	s.batchCap = batch
	s.fold.minBins = minBins
	D := g.Pixels * g.Lags
	x := make([]float64, D)
	var counts []Count
	for k := range g.HalfA {
		if k == readAt {
			s.CrossTo(make([]float64, D), 0)
		}
		staLagged(x, g.Frames, k+g.Lags-1, g.Lags)
		counts = counts[:0]
		for u := len(g.Counts) - 1; u >= 0; u-- {
			y := g.Counts[u][k]
			if y == 0 {
				continue
			}
			if u == 2 && y > 1 {
				counts = append(counts, Count{Unit: u, N: 1}, Count{Unit: u, N: y - 1})
				continue
			}
			counts = append(counts, Count{Unit: u, N: y})
		}
		s.AddBin(x, g.HalfA[k], counts)
	}
	if s.Units() != 3 || s.Bins() != int64(len(g.HalfA)) {
		t.Fatalf("Units, Bins = %d, %d; want 3, %d", s.Units(), s.Bins(), len(g.HalfA))
	}
	a, b := make([]float64, D), make([]float64, D)
	ac := make([]float64, g.Lags)
	for u := range g.Counts {
		var total float64
		for _, y := range g.Counts[u] {
			total += y
		}
		if s.Spikes(u) != total {
			t.Errorf("Spikes(%d) = %g, want %g", u, s.Spikes(u), total)
		}
		s.STATo(a, u)
		staCloseTo(t, fmt.Sprintf("STA unit %d", u), a, g.STA[u], 1e-12)
		s.HalvesTo(a, b, u)
		staCloseTo(t, fmt.Sprintf("half A unit %d", u), a, g.HalfASTA[u], 1e-12)
		staCloseTo(t, fmt.Sprintf("half B unit %d", u), b, g.HalfBSTA[u], 1e-12)
		s.CrossTo(a, u)
		staCloseTo(t, fmt.Sprintf("cross unit %d", u), a, g.Cross[u], 1e-12)
		s.AutocovTo(ac, u)
		staCloseTo(t, fmt.Sprintf("autocov unit %d", u), ac, g.Autocov[u], 1e-12)
	}
}

func TestSTARejectsBadCounts(t *testing.T) {
	x := []float64{1, -1}
	for _, tc := range []struct {
		name  string
		c     Count
		bad   int64
		spike float64
	}{
		{"negative unit", Count{Unit: -1, N: 2}, 1, 0},
		{"negative count", Count{Unit: 0, N: -1}, 1, 0},
		{"NaN", Count{Unit: 0, N: math.NaN()}, 1, 0},
		{"Inf", Count{Unit: 0, N: math.Inf(1)}, 1, 0},
		{"zero is skipped", Count{Unit: 0, N: 0}, 0, 0},
		{"good", Count{Unit: 0, N: 3}, 0, 3},
	} {
		t.Run(tc.name, func(t *testing.T) {
			s := NewSTA(2, 1)
			s.AddBin(x, true, []Count{tc.c})
			if s.Rejected() != tc.bad || s.Spikes(0) != tc.spike {
				t.Fatalf("Rejected, Spikes = %d, %g; want %d, %g", s.Rejected(), s.Spikes(0), tc.bad, tc.spike)
			}
		})
	}
}

// TestSTAHandWorked: two bins of a 1-pixel, 2-lag stimulus, worked by hand.
// Bin 0 (half A): x = (1, 0), y = 2. Bin 1 (half B): x = (3, 1), y = 1.
// x̄ = (2, 0.5); STA = (2·(1,0) + (3,1))/3 − x̄ = (5/3 − 2, 1/3 − 0.5);
// cross = 3·STA; half A centred on its own mean gives (0, 0), as does B;
// ȳ = 1.5, A(0) = 0.25 + 0.25 = 0.5, A(1) = (0.5)(−0.5) = −0.25.
func TestSTAHandWorked(t *testing.T) {
	s := NewSTA(1, 2)
	s.AddBin([]float64{1, 0}, true, []Count{{0, 2}})
	s.AddBin([]float64{3, 1}, false, []Count{{0, 1}})
	got := make([]float64, 2)
	s.STATo(got, 0)
	staCloseTo(t, "STA", got, []float64{5.0/3 - 2, 1.0/3 - 0.5}, 1e-15)
	s.CrossTo(got, 0)
	staCloseTo(t, "cross", got, []float64{-1, -0.5}, 1e-15)
	b := make([]float64, 2)
	s.HalvesTo(got, b, 0)
	staCloseTo(t, "half A", got, []float64{0, 0}, 1e-15)
	staCloseTo(t, "half B", b, []float64{0, 0}, 1e-15)
	s.AutocovTo(got, 0)
	staCloseTo(t, "autocov", got, []float64{0.5, -0.25}, 1e-15)
	s.STATo(got, 7) // unknown unit
	staCloseTo(t, "unknown unit", got, []float64{0, 0}, 0)

	s.Reset()
	if s.Bins() != 0 || s.Spikes(0) != 0 || s.Units() != 1 {
		t.Fatalf("after Reset: Bins %d Spikes %g Units %d", s.Bins(), s.Spikes(0), s.Units())
	}
	s.AutocovTo(got, 0)
	staCloseTo(t, "autocov after Reset", got, []float64{0, 0}, 0)
}

func TestSTAAddBinDoesNotAllocate(t *testing.T) {
	s := NewSTA(64, 8)
	x := make([]float64, s.Dim())
	counts := []Count{{0, 1}, {5, 2}, {9, 1}}
	s.AddBin(x, true, counts)
	half := false
	if a := testing.AllocsPerRun(200, func() {
		half = !half
		s.AddBin(x, half, counts)
	}); a != 0 {
		t.Fatalf("AddBin allocates %g times per bin", a)
	}
}

func BenchmarkSTAAddBin(b *testing.B) {
	for _, sz := range []struct{ pixels, lags, spiking int }{{256, 10, 4}, {1024, 12, 8}} {
		b.Run(fmt.Sprintf("D=%d/spiking=%d", sz.pixels*sz.lags, sz.spiking), func(b *testing.B) {
			rng := rand.New(rand.NewPCG(1, 2))
			s := NewSTA(sz.pixels, sz.lags)
			x := make([]float64, s.Dim())
			for i := range x {
				x[i] = float64(rng.IntN(2)*2 - 1)
			}
			counts := make([]Count, sz.spiking)
			for i := range counts {
				counts[i] = Count{Unit: 3 * i, N: 1}
			}
			s.Grow(3 * sz.spiking)
			b.ReportAllocs()
			b.ResetTimer()
			bins := 0
			for b.Loop() {
				s.AddBin(x, bins&64 == 0, counts)
				bins++
			}
			// Multiply-adds per bin: D for Σx plus D per spiking unit.
			madds := float64(bins) * float64(s.Dim()*(1+sz.spiking))
			b.ReportMetric(madds/float64(b.Elapsed().Nanoseconds()), "Gmadd/s")
		})
	}
}

// ExampleSTA maps a one-pixel cell that fires 2 spikes in every bin whose
// previous frame (lag 1) was bright, and tests the STA against the
// white-noise null of a ±1 stimulus (pixel variance 1).
func ExampleSTA() {
	const pixels, lags = 2, 3
	s := NewSTA(pixels, lags)
	frames := make([][]float64, 0, 400)
	x := make([]float64, pixels*lags)
	for k := 0; k < 400; k++ {
		// A fixed pseudo-random ±1 pattern (bits of a Weyl sequence).
		v := uint32(k) * 2654435761
		frames = append(frames, []float64{float64(int(v>>31)*2 - 1), float64(int(v>>30&1)*2 - 1)})
		if k < lags-1 {
			continue
		}
		staLagged(x, frames, k, lags)
		var counts []Count
		if frames[k-1][0] > 0 {
			counts = []Count{{Unit: 0, N: 2}}
		}
		s.AddBin(x, (k/20)%2 == 0, counts)
	}
	sta := make([]float64, s.Dim())
	s.STATo(sta, 0)
	fmt.Printf("spikes %.0f, STA of pixel 0 at lag 1: %.2f\n", s.Spikes(0), sta[1*pixels+0])
	res, err := NewWhiteTest(pixels, lags).Unit(nil, s, 0, 1)
	fmt.Printf("Q = %.0f on %.0f degrees of freedom, -log10 p > 50: %v, err %v\n", res.Q, res.DOF, res.NegLog10P > 50, err)
	// Output:
	// spikes 400, STA of pixel 0 at lag 1: 0.99
	// Q = 398 on 6 degrees of freedom, -log10 p > 50: true, err <nil>
}

// TestMapperSTAAcrossLagRestart: a bad frame mid-stream restarts the lag
// history (Mapper.RestartLags); the bins after it must not be folded as
// shifts of the bins before (the Mapper tells the STA when a row is a
// shift). The STA is compared with the spike-triggered average summed
// directly from the used bins' lagged rows (Chichilnisky 2001's
// definition: Σ y x / Σ y − x̄).
func TestMapperSTAAcrossLagRestart(t *testing.T) {
	const w, h, lags, bins = 4, 3, 3, 600
	p := w * h
	m := whiteMapper(t, w, h, lags)
	m.Unit("a")
	r := rand.New(rand.NewPCG(9, 9))
	d := p * lags
	sumYX, sumX := make([]float64, d), make([]float64, d)
	var sumY, used float64
	var history [][]float64 // frames since the lags (re)started
	for k := range bins {
		frame := make([]float64, p)
		for i := range frame {
			frame[i] = float64(r.IntN(2)*2 - 1)
		}
		y := float64(r.IntN(3))
		if k == 200 || k == 401 {
			bad := slices.Clone(frame)
			bad[5] = math.NaN()
			if err := m.AddBin(bad, []Count{{Unit: 0, N: 1}}); err == nil {
				t.Fatal("a NaN frame was accepted")
			}
			history = history[:0]
		}
		if err := m.AddBin(frame, []Count{{Unit: 0, N: y}}); err != nil {
			t.Fatal(err)
		}
		history = append(history, frame)
		if len(history) < lags {
			continue
		}
		for l := range lags {
			f := history[len(history)-1-l]
			for i, v := range f {
				sumYX[l*p+i] += y * v
				sumX[l*p+i] += v
			}
		}
		sumY += y
		used++
	}
	got := make([]float64, d)
	m.sta.STATo(got, 0)
	for i := range got {
		want := sumYX[i]/sumY - sumX[i]/used
		if math.Abs(got[i]-want) > 1e-12 {
			t.Fatalf("STA[%d] = %.15g, summed directly %.15g", i, got[i], want)
		}
	}
}

// TestMapperSTASharedCounts: inside a Mapper the STA reads its count lag
// products from the calibration's (lags 0…32 of the same bins); they must
// equal what a standalone STA fed the same rows keeps itself, bit for bit,
// lag by lag (the autocovariance the white-noise test whitens with).
func TestMapperSTASharedCounts(t *testing.T) {
	const w, h, lags, bins = 3, 2, 5, 3000
	p := w * h
	m := whiteMapper(t, w, h, lags)
	alone := NewSTA(p, lags)
	for _, id := range []string{"a", "b"} {
		m.Unit(id)
	}
	r := rand.New(rand.NewPCG(4, 4))
	var frames [][]float64
	for k := range bins {
		frame := make([]float64, p)
		for i := range frame {
			frame[i] = float64(r.IntN(2)*2 - 1)
		}
		var counts []Count
		for u := range 2 {
			if n := r.IntN(4) - 1; n > 0 { // bursts of 1 or 2
				counts = append(counts, Count{Unit: u, N: float64(n)})
			}
		}
		if err := m.AddBin(frame, counts); err != nil {
			t.Fatal(err)
		}
		frames = append(frames, frame)
		if k < lags-1 {
			continue
		}
		x := make([]float64, p*lags)
		for l := range lags {
			copy(x[l*p:(l+1)*p], frames[k-l])
		}
		chunk := int64(float64(k-lags+1) * m.cfg.FramePeriod / m.cfg.ChunkSeconds)
		alone.AddBin(x, chunk%2 == 0, counts)
	}
	got, want := make([]float64, lags), make([]float64, lags)
	for u := range 2 {
		m.sta.AutocovTo(got, u)
		alone.AutocovTo(want, u)
		for d := range got {
			if got[d] != want[d] {
				t.Errorf("unit %d lag %d: %v in the mapper, %v alone", u, d, got[d], want[d])
			}
		}
	}
}

// whiteMapper is a mapper of white binary noise without the prior fits,
// closed when the test ends.
func whiteMapper(t *testing.T, w, h, lags int) *Mapper {
	t.Helper()
	m, err := NewMapper(Config{Width: w, Height: h, Lags: lags, White: true, PixelVariance: 1, NoPrior: true})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(m.Close)
	return m
}
