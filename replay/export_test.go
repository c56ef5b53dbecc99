package replay

import (
	"bytes"
	"context"
	"encoding/json"
	"image/png"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"livefield/online"
	"livefield/replay/session"
	"livefield/stream/npy"
)

var exported struct {
	once sync.Once
	dir  string
	out  Exported
	err  error
}

// exportFixture exports the committed session once for the tests below.
func exportFixture(t *testing.T) (string, Exported, *online.Snapshot) {
	t.Helper()
	exported.once.Do(func() {
		dir, err := os.MkdirTemp("", "livefield-export-")
		if err != nil {
			exported.err = err
			return
		}
		// The first 10 s of the committed session (the block never ends:
		// the export closes it after the last record).
		exported.dir = dir
		path := filepath.Join(dir, "first10s.lfs")
		w, err := session.Create(path, session.Header{Rig: fixtureRig, Prefix: fixturePrefix})
		if err != nil {
			exported.err = err
			return
		}
		for _, r := range readRecords(t, fixturePath) {
			if r.At.Sub(fixtureStart) <= 10*time.Second {
				w.Write(r)
			}
		}
		if exported.err = w.Close(); exported.err != nil {
			return
		}
		f, err := session.Open(path)
		if err != nil {
			exported.err = err
			return
		}
		defer f.Close()
		exported.out, exported.err = Export(context.Background(), f.Reader, dir, ExportOptions{})
	})
	if exported.err != nil {
		t.Fatal(exported.err)
	}
	out := exported.out
	want := out.Final
	if want == nil || len(want.Units) == 0 || len(out.Units) != len(want.Units) {
		t.Fatalf("exported %d units of a snapshot %v", len(out.Units), want)
	}
	return exported.dir, out, want
}

func TestMain(m *testing.M) {
	code := m.Run()
	if exported.dir != "" {
		os.RemoveAll(exported.dir)
	}
	os.Exit(code)
}

// TestExportFiles reads the exported NPY files back with the project's
// NPY reader and checks shape and values, bit for bit, against the
// snapshot they were written from.
func TestExportFiles(t *testing.T) {
	dir, out, want := exportFixture(t)
	if out.Block != "B1" {
		t.Errorf("block %q, want B1", out.Block)
	}
	priors := 0
	for _, id := range out.Units {
		d, _ := want.Detail(id)
		files := []struct {
			file string
			want online.Floats
		}{{FileName(id) + ".npy", d.Ridge}, {FileName(id) + ".sta.npy", d.STA}}
		if d.Prior != nil {
			priors++
			files = append(files, struct {
				file string
				want online.Floats
			}{FileName(id) + ".prior.npy", d.Prior})
		}
		for _, c := range files {
			b, err := os.ReadFile(filepath.Join(dir, "units", c.file))
			if err != nil {
				t.Fatal(err)
			}
			a, err := npy.Read(bytes.NewReader(b))
			if err != nil {
				t.Fatalf("%s: %v", c.file, err)
			}
			if a.Descr != "<f8" || len(a.Shape) != 3 || a.Shape[0] != d.Shape[0] || a.Shape[1] != d.Shape[1] || a.Shape[2] != d.Shape[2] {
				t.Fatalf("%s: %s %v, want <f8 %v", c.file, a.Descr, a.Shape, d.Shape)
			}
			got := make([]float64, a.Len())
			if err := a.Float64To(got, 0); err != nil {
				t.Fatal(err)
			}
			for i := range got {
				if got[i] != float64(c.want[i]) {
					t.Fatalf("%s[%d] = %v, want %v", c.file, i, got[i], c.want[i])
				}
			}
		}
		var uf UnitFile
		b, err := os.ReadFile(filepath.Join(dir, "units", FileName(id)+".json"))
		if err != nil {
			t.Fatal(err)
		}
		if err := json.Unmarshal(b, &uf); err != nil || uf.ID != id || uf.Shape != d.Shape || uf.Features.PeakLag != d.Features.PeakLag {
			t.Errorf("%s.json: %v %+v", id, err, uf)
		}
		if (uf.Prior != "") != (d.Prior != nil) || (uf.PriorHyper == nil) != (d.Prior == nil) {
			t.Errorf("%s.json: prior file %q and hyperparameters %v for a prior of %d values", id, uf.Prior, uf.PriorHyper, len(d.Prior))
		}
	}
	if priors == 0 {
		t.Error("no unit was exported with a prior estimate")
	}
	fh, err := os.Open(filepath.Join(dir, "contact.png"))
	if err != nil {
		t.Fatal(err)
	}
	defer fh.Close()
	img, err := png.Decode(fh)
	if err != nil || img.Bounds().Dx() < 16 || img.Bounds().Dy() < 16 {
		t.Errorf("contact.png: %v", err)
	}
}

// TestExportNumpy reads the NPY files with numpy (Debian's python3-numpy),
// an independent reader of the format; it skips when numpy is absent.
func TestExportNumpy(t *testing.T) {
	if err := exec.Command("/usr/bin/python3", "-c", "import numpy").Run(); err != nil {
		t.Skip("/usr/bin/python3 with numpy not available:", err)
	}
	dir, out, want := exportFixture(t)
	script := `import sys, numpy
for p in sys.argv[1:]:
    a = numpy.load(p, allow_pickle=False)
    print(a.dtype.str, *a.shape, repr(float(a.sum())), repr(float(a[a.shape[0]//2, 3, 5])))`
	args := []string{"-c", script}
	for _, id := range out.Units {
		args = append(args, filepath.Join(dir, "units", FileName(id)+".npy"))
	}
	res, err := exec.Command("/usr/bin/python3", args...).CombinedOutput()
	if err != nil {
		t.Fatalf("numpy: %v\n%s", err, res)
	}
	lines := strings.Split(strings.TrimSpace(string(res)), "\n")
	if len(lines) != len(out.Units) {
		t.Fatalf("numpy printed %d lines for %d files:\n%s", len(lines), len(out.Units), res)
	}
	for i, id := range out.Units {
		d, _ := want.Detail(id)
		f := strings.Fields(lines[i])
		L, H, W := d.Shape[0], d.Shape[1], d.Shape[2]
		if len(f) != 6 || f[0] != "<f8" || f[1] != strconv.Itoa(L) || f[2] != strconv.Itoa(H) || f[3] != strconv.Itoa(W) {
			t.Fatalf("unit %s: numpy sees %q, want <f8 %d %d %d", id, lines[i], L, H, W)
		}
		var sum float64
		for _, v := range d.Ridge {
			sum += float64(v)
		}
		gotSum, _ := strconv.ParseFloat(f[4], 64)
		gotAt, _ := strconv.ParseFloat(f[5], 64)
		// The element at (lag L/2, row 3, column 5) is exact; the sums
		// differ only by summation order.
		if wantAt := float64(d.Ridge[(L/2)*H*W+3*W+5]); gotAt != wantAt {
			t.Errorf("unit %s: numpy a[%d,3,5] = %v, want %v", id, L/2, gotAt, wantAt)
		}
		if math.Abs(gotSum-sum) > 1e-9*(1+math.Abs(sum)) {
			t.Errorf("unit %s: numpy sum %v, want %v", id, gotSum, sum)
		}
	}
}

func TestFileName(t *testing.T) {
	cases := []struct{ id, want string }{
		{"12", "12"},
		{"ch3_u-1", "ch3_u-1"},
		{"..", "%2E."},
		{"ch07.1", "ch07.1"},
		{".hidden", "%2Ehidden"},
		{"a%2Eb", "a%252Eb"},
		{"a/b", "a%2Fb"},
		{"é", "%C3%A9"},
	}
	for _, c := range cases {
		if got := FileName(c.id); got != c.want {
			t.Errorf("FileName(%q) = %q, want %q", c.id, got, c.want)
		}
	}
}
