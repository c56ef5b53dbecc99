package replay

import (
	"cmp"
	"context"
	"encoding/json"
	"flag"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"slices"
	"testing"
	"time"

	"livefield/online"
	"livefield/replay/session"
	"livefield/replay/synth"
	"livefield/stream/npy"
	"livefield/stream/stimulus"
	"livefield/stream/wire"
)

var dumpDesign = flag.Bool("dump-design", false, "write the design of TestExportIsBatchRidge to testdata/golden/export_check/ for export_check.py")

// The batch-check session: 8×8 binary noise at 60 Hz, 4 lags (D = 256),
// the synthetic cortex's default population, 20 s.
const (
	checkSeconds = 20
	checkLags    = 4
	checkPeriod  = 1.0 / 60
	checkBlock   = "C1"
)

var checkSpec = stimulus.Spec{Type: stimulus.Binary, Width: 8, Height: 8, Seed: 11}

// checkDesign is what the check session holds, bin by bin, as its
// generator made it: frame k is on screen in bin k, counts[k] are the
// spikes per unit in bin k.
type checkDesign struct {
	frames [][]float64
	counts []map[string]float64
	units  []string // sorted
}

// writeCheckSession writes the check session to path: a block start,
// then every 10 frames a frames message and a spikes message, then the
// block end. It returns the bins as the generator made them, independent
// of the binner.
func writeCheckSession(t testing.TB, path string) checkDesign {
	t.Helper()
	src, err := stimulus.Open(checkSpec, "")
	if err != nil {
		t.Fatal(err)
	}
	cortex, err := synth.New(synth.Scenario{Width: 8, Height: 8, Lags: checkLags, FramePeriod: checkPeriod, Seed: 3}, src)
	if err != nil {
		t.Fatal(err)
	}
	w, err := session.Create(path, session.Header{Rig: "check", Prefix: "livefield.check"})
	if err != nil {
		t.Fatal(err)
	}
	t0 := time.Date(2026, 5, 1, 11, 0, 0, 0, time.UTC)
	put := func(at float64, subject string, data []byte, err error) {
		t.Helper()
		if err != nil {
			t.Fatal(err)
		}
		if err := w.Write(session.Record{At: t0.Add(time.Duration(at * float64(time.Second))), Subject: subject, Data: data}); err != nil {
			t.Fatal(err)
		}
	}
	stim, _ := json.Marshal(checkSpec)
	start, err := wire.EncodeBlock(wire.Block{Kind: wire.KindStart, Block: checkBlock, T: 0, Lags: checkLags, FramePeriod: checkPeriod, Stimulus: stim})
	put(0, wire.SubjectBlock, start, err)
	var d checkDesign
	seen := map[string]bool{}
	n := int64(math.Round(checkSeconds / checkPeriod))
	type spike struct {
		unit string
		t    float64
	}
	var batch []spike
	var fr wire.Frames
	for k := range n {
		onset := float64(k) * checkPeriod
		frame := make([]float64, 64)
		if err := src.FrameTo(frame, k); err != nil {
			t.Fatal(err)
		}
		counts := map[string]float64{}
		err := cortex.Bin(k, k, onset, float64(k+1)*checkPeriod, func(unit string, s float64) {
			counts[unit]++
			seen[unit] = true
			batch = append(batch, spike{unit, s})
		})
		if err != nil {
			t.Fatal(err)
		}
		d.frames, d.counts = append(d.frames, frame), append(d.counts, counts)
		fr.Block = checkBlock
		fr.Index, fr.T = append(fr.Index, k), append(fr.T, onset)
		if (k+1)%10 == 0 || k == n-1 {
			at := float64(k+1) * checkPeriod
			slices.SortStableFunc(batch, func(a, b spike) int { return cmp.Compare(a.t, b.t) })
			var sp wire.Spikes
			for _, s := range batch {
				sp.Unit, sp.T = append(sp.Unit, s.unit), append(sp.T, s.t)
			}
			data, err := wire.EncodeFrames(fr)
			put(at, wire.SubjectFrames, data, err)
			if len(batch) > 0 {
				data, err = wire.EncodeSpikes(sp)
				put(at, wire.SubjectSpikes, data, err)
			}
			fr, batch = wire.Frames{}, batch[:0]
		}
	}
	end, err := wire.EncodeBlock(wire.Block{Kind: wire.KindEnd, Block: checkBlock, T: float64(n) * checkPeriod})
	put(float64(n)*checkPeriod+0.5, wire.SubjectBlock, end, err)
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	for id := range seen {
		d.units = append(d.units, id)
	}
	slices.Sort(d.units)
	return d
}

// matrices returns the design of the bins with a full lag history (bin k
// for k ≥ lags−1): X's row holds frame k, frame k−1, … (lag-major, as the
// estimates), Y's row the counts of d.units.
func (d checkDesign) matrices() (x, y []float64, rows int) {
	for k := checkLags - 1; k < len(d.frames); k++ {
		for lag := range checkLags {
			x = append(x, d.frames[k-lag]...)
		}
		for _, id := range d.units {
			y = append(y, d.counts[k][id])
		}
		rows++
	}
	return x, y, rows
}

// batchRidge is the ridge of the same bins by the online package's batch
// route (the lag Gram and one Cholesky), with the estimator's default λ
// for this stimulus.
func (d checkDesign) batchRidge(t *testing.T) (weights map[string][]float64, lambda float64) {
	t.Helper()
	src, err := stimulus.Open(checkSpec, "")
	if err != nil {
		t.Fatal(err)
	}
	m, err := online.NewMapper(online.Config{Width: 8, Height: 8, Lags: checkLags, FramePeriod: checkPeriod, White: src.White(), PixelVariance: src.PixelVariance()})
	if err != nil {
		t.Fatal(err)
	}
	for _, id := range d.units {
		m.Unit(id)
	}
	var counts []online.Count
	for k, frame := range d.frames {
		counts = counts[:0]
		for _, id := range d.units {
			if n := d.counts[k][id]; n > 0 {
				counts = append(counts, online.Count{Unit: m.Unit(id), N: n})
			}
		}
		if err := m.AddBin(frame, counts); err != nil {
			t.Fatal(err)
		}
	}
	w := make([][]float64, len(d.units))
	for u := range w {
		w[u] = make([]float64, m.Config().Lags*64)
	}
	b := make([]float64, len(d.units))
	lambda = m.Config().Lambda
	if err := m.BatchRidgeTo(w, b, lambda); err != nil {
		t.Fatal(err)
	}
	weights = map[string][]float64{}
	for u, id := range d.units {
		weights[id] = w[u]
	}
	return weights, lambda
}

// numpyCheck is testdata/golden/export_check.json.
type numpyCheck struct {
	Source string  `json:"source"`
	Lambda float64 `json:"lambda"`
	Rows   int     `json:"rows"`
	Units  []struct {
		ID        string    `json:"id"`
		Intercept float64   `json:"intercept"`
		Weights   []float64 `json:"weights"`
	} `json:"units"`
}

const checkGolden = "../testdata/golden/export_check.json"

// relErr is max|got − want| / max|want| (the absolute error when want is 0).
func relErr(got online.Floats, want []float64) float64 {
	if len(got) != len(want) {
		return math.Inf(1)
	}
	var diff, scale float64
	for i := range want {
		diff = math.Max(diff, math.Abs(float64(got[i])-want[i]))
		scale = math.Max(scale, math.Abs(want[i]))
	}
	if scale == 0 {
		return diff
	}
	return diff / scale
}

// TestExportIsBatchRidge: the ridge that export writes for each unit (fed
// by the full-speed route: every bin, then one update at the block end) is
// the batch ridge of the same bins, to 1e-8 relative, computed two other
// ways: numpy solving the centred normal equations from the design that
// the session's generator made (testdata/golden/export_check.py, its JSON
// committed), and the online package's batch route (lag Gram, Cholesky).
// The 1e-8 is far above the rounding of either route (about 1e-13 here)
// and far below any modelling difference: a λ off by one part in 10⁶
// moves the weights by more.
func TestExportIsBatchRidge(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "check.lfs")
	d := writeCheckSession(t, path)
	x, y, rows := d.matrices()
	if *dumpDesign {
		dumpCheckDesign(t, x, y, rows, d.units)
	}
	f, err := session.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	out, err := Export(context.Background(), f.Reader, filepath.Join(dir, "out"), ExportOptions{})
	if err != nil {
		t.Fatal(err)
	}
	final := out.Final
	if final.Bins != int64(rows) || len(final.Units) != len(d.units) {
		t.Fatalf("export: %d bins and %d units, the generator made %d bins with a full history and %d units", final.Bins, len(final.Units), rows, len(d.units))
	}
	ridge := func(id string) online.Floats {
		dt, ok := final.Detail(id)
		if !ok {
			t.Fatalf("unit %s missing from the export", id)
		}
		return dt.Ridge
	}

	batch, lambda := d.batchRidge(t)
	worst := 0.0
	for _, id := range d.units {
		e := relErr(ridge(id), batch[id])
		worst = math.Max(worst, e)
		if !(e <= 1e-8) {
			t.Errorf("unit %s: exported ridge differs from online's batch ridge by %.3g relative", id, e)
		}
	}
	t.Logf("exported ridge vs online batch route: worst relative difference %.2g over %d units", worst, len(d.units))

	b, err := os.ReadFile(checkGolden)
	if err != nil {
		t.Fatalf("%v (make it with -dump-design and testdata/golden/export_check.py)", err)
	}
	var ref numpyCheck
	if err := json.Unmarshal(b, &ref); err != nil {
		t.Fatal(err)
	}
	if ref.Lambda != lambda || ref.Rows != rows || len(ref.Units) != len(d.units) {
		t.Fatalf("%s: λ %v, %d rows, %d units; this session has λ %v, %d rows, %d units (rerun -dump-design and the script)", checkGolden, ref.Lambda, ref.Rows, len(ref.Units), lambda, rows, len(d.units))
	}
	worst = 0
	for _, u := range ref.Units {
		e := relErr(ridge(u.ID), u.Weights)
		worst = math.Max(worst, e)
		if !(e <= 1e-8) {
			t.Errorf("unit %s: exported ridge differs from numpy's batch ridge by %.3g relative", u.ID, e)
		}
	}
	t.Logf("exported ridge vs numpy: worst relative difference %.2g", worst)
}

// dumpCheckDesign writes X.npy (rows × D), Y.npy (rows × units) and
// units.json for testdata/golden/export_check.py.
func dumpCheckDesign(t *testing.T, x, y []float64, rows int, units []string) {
	t.Helper()
	dir := "../testdata/golden/export_check"
	if err := os.MkdirAll(dir, 0o755); err != nil {
		t.Fatal(err)
	}
	for _, a := range []struct {
		name string
		cols int
		v    []float64
	}{{"X.npy", len(x) / rows, x}, {"Y.npy", len(units), y}} {
		fh, err := os.Create(filepath.Join(dir, a.name))
		if err != nil {
			t.Fatal(err)
		}
		if err := npy.Write(fh, []int{rows, a.cols}, a.v); err != nil {
			t.Fatal(err)
		}
		if err := fh.Close(); err != nil {
			t.Fatal(err)
		}
	}
	b, _ := json.Marshal(units)
	if err := os.WriteFile(filepath.Join(dir, "units.json"), b, 0o644); err != nil {
		t.Fatal(err)
	}
	fmt.Fprintf(os.Stderr, "wrote the design (%d rows) to %s\n", rows, dir)
}
