package replay

import (
	"bytes"
	"context"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"testing"

	"livefield/replay/session"
	"livefield/stream/npy"
)

// TestExportPoisson exports the fixture's first 10 s with the Poisson
// refinement and checks its files: every unit with a smooth-local estimate
// has units/<name>.poisson.npy of the estimates' shape, zero outside the
// prior's window (the layout of the prior's file), and the refinement's
// fields in its JSON; the other files are those of the plain export.
func TestExportPoisson(t *testing.T) {
	plainDir, plain, _ := exportFixture(t)
	f, err := session.Open(filepath.Join(plainDir, "first10s.lfs"))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	dir := t.TempDir()
	var calls, lastDone, lastTotal int
	out, err := Export(context.Background(), f.Reader, dir, ExportOptions{
		Poisson:         true,
		PoissonProgress: func(done, total int) { calls, lastDone, lastTotal = calls+1, done, total },
	})
	if err != nil {
		t.Fatal(err)
	}
	p := out.Poisson
	t.Logf("Poisson refinement: %+v", p)
	if p.Units == 0 || p.Fitted+p.Failed != p.Units || p.Bins == 0 || p.StoreBytes <= 0 {
		t.Fatalf("counts %+v", p)
	}
	if calls != 1+p.Units-failedBeforeFit(t, dir, out.Units) || lastDone != lastTotal {
		t.Errorf("progress: %d calls, last %d of %d", calls, lastDone, lastTotal)
	}
	if len(out.Files) != len(plain.Files)+p.Fitted {
		t.Errorf("%d files, plain export %d plus %d refined", len(out.Files), len(plain.Files), p.Fitted)
	}
	refined := 0
	for _, id := range out.Units {
		name := filepath.Join(dir, "units", FileName(id))
		raw, err := os.ReadFile(name + ".json")
		if err != nil {
			t.Fatal(err)
		}
		var uf UnitFile
		var keys map[string]json.RawMessage
		if err := json.Unmarshal(raw, &uf); err != nil {
			t.Fatal(err)
		}
		if err := json.Unmarshal(raw, &keys); err != nil {
			t.Fatal(err)
		}
		if uf.PriorHyper == nil {
			if uf.PoissonSummary != nil {
				t.Errorf("%s: refined without a smooth-local estimate", id)
			}
			continue
		}
		for _, k := range []string{"poisson_log_posterior", "poisson_iterations", "poisson_converged", "prior_window"} {
			if _, ok := keys[k]; !ok {
				t.Errorf("%s.json has no %q", id, k)
			}
		}
		if uf.PoissonFile == "" {
			if uf.PoissonError == "" {
				t.Errorf("%s: neither a Poisson file nor a reason", id)
			}
			continue
		}
		refined++
		// The kept bins are those behind the smooth-local fit (the
		// mapper's used bins).
		if uf.PriorBins != int64(p.Bins) {
			t.Errorf("%s: the prior was fitted on %d bins, the refinement kept %d", id, uf.PriorBins, p.Bins)
		}
		if uf.PoissonFile != "units/"+FileName(id)+".poisson.npy" || uf.PoissonIterations < 1 || math.IsNaN(float64(uf.PoissonLogPosterior)) {
			t.Errorf("%s: %+v", id, *uf.PoissonSummary)
		}
		w := readNPY(t, filepath.Join(dir, uf.PoissonFile), uf.Shape)
		win := *uf.PriorWindow
		inside := map[int]bool{}
		for _, i := range win.Indices(uf.Shape[2], uf.Shape[1]) {
			inside[i] = true
		}
		nonzero := 0
		for i, v := range w {
			if v != 0 && !inside[i] {
				t.Fatalf("%s[%d] = %v outside the window %+v", uf.PoissonFile, i, v, win)
			}
			if v != 0 {
				nonzero++
			}
		}
		if nonzero == 0 {
			t.Errorf("%s: all zero", uf.PoissonFile)
		}
		// The rest is the plain export's, up to the order of the parallel
		// sums (two plain exports differ by 1e-17 on weights of 1e-3).
		for _, ext := range []string{".npy", ".prior.npy"} {
			got, want := readNPY(t, name+ext), readNPY(t, filepath.Join(plainDir, "units", FileName(id)+ext))
			var scale, diff float64
			for i := range want {
				scale = math.Max(scale, math.Abs(want[i]))
				diff = math.Max(diff, math.Abs(got[i]-want[i]))
			}
			if len(got) != len(want) || diff > 1e-9*scale {
				t.Errorf("%s%s differs from the plain export's by %g (largest weight %g)", id, ext, diff, scale)
			}
		}
	}
	if refined != p.Fitted || refined == 0 {
		t.Errorf("%d units refined, counts say %d", refined, p.Fitted)
	}
}

// readNPY reads a float64 NPY file, of the given shape when one is given.
func readNPY(t *testing.T, path string, shape ...[3]int) []float64 {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	a, err := npy.Read(bytes.NewReader(b))
	if err != nil {
		t.Fatalf("%s: %v", path, err)
	}
	for _, sh := range shape {
		if a.Descr != "<f8" || len(a.Shape) != 3 || a.Shape[0] != sh[0] || a.Shape[1] != sh[1] || a.Shape[2] != sh[2] {
			t.Fatalf("%s: %s %v, want <f8 %v", path, a.Descr, a.Shape, sh)
		}
	}
	w := make([]float64, a.Len())
	if err := a.Float64To(w, 0); err != nil {
		t.Fatal(err)
	}
	return w
}

// failedBeforeFit counts the units whose refinement failed before a fit was
// tried (they are not reported to PoissonProgress).
func failedBeforeFit(t *testing.T, dir string, ids []string) int {
	t.Helper()
	n := 0
	for _, id := range ids {
		raw, err := os.ReadFile(filepath.Join(dir, "units", FileName(id)+".json"))
		if err != nil {
			t.Fatal(err)
		}
		var uf UnitFile
		if err := json.Unmarshal(raw, &uf); err != nil {
			t.Fatal(err)
		}
		if uf.PoissonSummary != nil && uf.PoissonError == "the unit has no bins" {
			n++
		}
	}
	return n
}
