package stimulus

import (
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
)

const dataDir = "../../testdata/stimulus"

// TestSplitMix64Reference: the first outputs of SplitMix64 seeded with
// 1234567. Values from memory of the reference implementation's published
// example output (Vigna's splitmix64.c test vector); the independent Python
// implementation in testdata/stimulus/noise_golden.py gives the same.
func TestSplitMix64Reference(t *testing.T) {
	want := []uint64{6457827717110365317, 3203168211198807973, 9817491932198370423}
	for n, w := range want {
		if got := SplitMix64(1234567, uint64(n)); got != w {
			t.Errorf("output %d = %d, want %d", n, got, w)
		}
	}
	g := loadGolden(t)
	for n, s := range g.SplitMix {
		w, _ := strconv.ParseUint(s, 10, 64)
		if got := SplitMix64(1234567, uint64(n)); got != w {
			t.Errorf("output %d = %d, Python %d", n, got, w)
		}
	}
}

type goldenFile struct {
	SplitMix []string `json:"splitmix64_seed_1234567_first"`
	Cases    []struct {
		Name    string          `json:"name"`
		Spec    json.RawMessage `json:"spec"`
		Indices []int64         `json:"frame_indices"`
		Frames  [][]float64     `json:"frames"`
	} `json:"cases"`
}

func loadGolden(t *testing.T) goldenFile {
	t.Helper()
	raw, err := os.ReadFile(filepath.Join(dataDir, "noise_golden.json"))
	if err != nil {
		t.Fatal(err)
	}
	var g goldenFile
	if err := json.Unmarshal(raw, &g); err != nil {
		t.Fatal(err)
	}
	return g
}

// TestNoiseGolden compares frames with testdata/stimulus/noise_golden.json,
// produced by an independent Python/numpy implementation of the rules in
// the package doc (testdata/stimulus/noise_golden.py).
func TestNoiseGolden(t *testing.T) {
	g := loadGolden(t)
	if len(g.Cases) < 8 {
		t.Fatalf("golden has %d cases, want 8", len(g.Cases))
	}
	for _, tc := range g.Cases {
		t.Run(tc.Name, func(t *testing.T) {
			spec, err := ParseSpec(tc.Spec)
			if err != nil {
				t.Fatal(err)
			}
			src, err := Open(spec, "")
			if err != nil {
				t.Fatal(err)
			}
			dst := make([]float64, src.Width()*src.Height())
			for i, f := range tc.Indices {
				if err := src.FrameTo(dst, f); err != nil {
					t.Fatal(err)
				}
				for p, want := range tc.Frames[i] {
					if dst[p] != want {
						t.Fatalf("frame %d pixel %d = %v, Python %v\ngot  %v\nwant %v", f, p, dst[p], want, dst, tc.Frames[i])
					}
				}
			}
		})
	}
}

// TestPixelVariance checks White and PixelVariance against the derivations
// in the package doc, and the variance and mean empirically. With N
// independent samples the sample variance has standard error
// sqrt((μ4 − σ⁴)/N) (standard result for the variance of the sample
// variance); we allow 5 standard errors. Sparse pixels are not independent
// within a frame, so only one fixed pixel per frame is sampled there.
func TestPixelVariance(t *testing.T) {
	tests := []struct {
		spec    Spec
		white   bool
		wantVar float64
	}{
		{Spec{Type: Binary, Width: 16, Height: 16, Seed: 1}, true, 1},
		{Spec{Type: Binary, Width: 4, Height: 4, Seed: 2, Contrast: 0.5}, true, 0.25},
		{Spec{Type: Ternary, Width: 16, Height: 16, Seed: 3, Contrast: 3}, true, 6},
		{Spec{Type: Sparse, Width: 8, Height: 8, Seed: 4, Squares: 4}, true, 1 - math.Pow(63.0/64, 4)},
		{Spec{Type: Sparse, Width: 8, Height: 4, Seed: 5, Squares: 3, Size: 2, Contrast: 2}, false, 4 * (1 - math.Pow(7.0/8, 3))},
		{Spec{Type: Sparse, Width: 2, Height: 2, Seed: 6, Squares: 5, Size: 2}, false, 1},
	}
	for _, tc := range tests {
		t.Run(fmt.Sprintf("%s_%dx%d_k%d_s%d", tc.spec.Type, tc.spec.Width, tc.spec.Height, tc.spec.Squares, tc.spec.Size), func(t *testing.T) {
			src, err := Open(tc.spec, "")
			if err != nil {
				t.Fatal(err)
			}
			if src.White() != tc.white {
				t.Errorf("White() = %v, want %v", src.White(), tc.white)
			}
			if v := src.PixelVariance(); math.Abs(v-tc.wantVar) > 1e-15*tc.wantVar {
				t.Errorf("PixelVariance() = %v, want %v", v, tc.wantVar)
			}
			dst := make([]float64, src.Width()*src.Height())
			var n, s1, s2 float64
			frames := 200000 / len(dst)
			if tc.spec.Type == Sparse {
				frames = 100000
			}
			for f := 0; f < frames; f++ {
				if err := src.FrameTo(dst, int64(f)); err != nil {
					t.Fatal(err)
				}
				pix := dst
				if tc.spec.Type == Sparse {
					pix = dst[f%len(dst) : f%len(dst)+1]
				}
				for _, x := range pix {
					n++
					s1 += x
					s2 += x * x
				}
			}
			// The true mean is 0 (to 2^-64), so the variance is the
			// second moment about 0.
			mean := s1 / n
			v := s2 / n
			c := tc.spec.contrast()
			// Values are 0 or ±c, so μ4 = c²·σ².
			se := math.Sqrt((c*c*tc.wantVar - tc.wantVar*tc.wantVar) / n)
			if se == 0 {
				se = 1e-12
			}
			if math.Abs(v-tc.wantVar) > 5*se {
				t.Errorf("sample variance %v over %v pixels, want %v ± %v", v, n, tc.wantVar, 5*se)
			}
			if ms := math.Sqrt(tc.wantVar / n); math.Abs(mean) > 5*ms {
				t.Errorf("sample mean %v, want 0 ± %v", mean, 5*ms)
			}
		})
	}
}

// TestSparseOverlap: the last square drawn on a cell wins, and at most
// `squares` cells are lit, each uniformly at its polarity.
func TestSparseOverlap(t *testing.T) {
	src, _ := Open(Spec{Type: Sparse, Width: 4, Height: 4, Seed: 11, Squares: 3, Size: 2}, "")
	dst := make([]float64, 16)
	for f := int64(0); f < 500; f++ {
		src.FrameTo(dst, f)
		lit := 0
		for r := 0; r < 4; r += 2 {
			for c := 0; c < 4; c += 2 {
				v := dst[r*4+c]
				if dst[r*4+c+1] != v || dst[(r+1)*4+c] != v || dst[(r+1)*4+c+1] != v {
					t.Fatalf("frame %d: cell (%d,%d) not uniform: %v", f, r, c, dst)
				}
				if v != 0 {
					lit++
				}
			}
		}
		if lit < 1 || lit > 3 {
			t.Fatalf("frame %d: %d cells lit, want 1…3", f, lit)
		}
	}
}

func TestParseSpecErrors(t *testing.T) {
	tests := []struct {
		name, json, want string
	}{
		{"no type", `{"width":4,"height":4}`, "no type"},
		{"unknown type", `{"type":"checker","width":4,"height":4}`, "unknown type"},
		{"unknown field", `{"type":"binary","width":4,"height":4,"colour":1}`, "unknown field"},
		{"zero width", `{"type":"binary","width":0,"height":4}`, "1…1024"},
		{"negative height", `{"type":"binary","width":4,"height":-4}`, "1…1024"},
		{"too wide", `{"type":"binary","width":4096,"height":4}`, "1…1024"},
		{"explicit zero contrast", `{"type":"binary","width":4,"height":4,"contrast":0}`, "contrast must be > 0"},
		{"negative contrast", `{"type":"ternary","width":4,"height":4,"contrast":-1}`, "finite and > 0"},
		{"huge contrast", `{"type":"ternary","width":4,"height":4,"contrast":1e999}`, "spec"},
		{"negative seed", `{"type":"binary","width":4,"height":4,"seed":-1}`, "spec"},
		{"squares on binary", `{"type":"binary","width":4,"height":4,"squares":2}`, "sparse"},
		{"size not dividing", `{"type":"sparse","width":10,"height":4,"size":4}`, "divide"},
		{"too many squares", `{"type":"sparse","width":4,"height":4,"squares":5000}`, "squares"},
		{"file on noise", `{"type":"binary","width":4,"height":4,"file":"a.npy"}`, "movies"},
		{"movie without file", `{"type":"movie"}`, "needs a file"},
		{"movie with width", `{"type":"movie","file":"a.npy","width":3}`, "only file"},
		{"movie bad sha", `{"type":"movie","file":"a.npy","sha256":"xyz"}`, "64 hex"},
		{"absolute", `{"type":"movie","file":"/etc/passwd"}`, "absolute"},
		{"dotdot", `{"type":"movie","file":"x/../../secret.npy"}`, `".."`},
		{"trailing", `{"type":"binary","width":4,"height":4} {}`, "trailing"},
		{"not json", `type=binary`, "spec"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, err := ParseSpec([]byte(tc.json))
			if err == nil {
				t.Fatal("no error")
			}
			if !strings.HasPrefix(err.Error(), "stimulus: ") || !strings.Contains(err.Error(), tc.want) {
				t.Fatalf("error %q, want prefix \"stimulus: \" and %q", err, tc.want)
			}
		})
	}
	// Validate on a Spec built in Go: NaN contrast.
	if err := (Spec{Type: Binary, Width: 2, Height: 2, Contrast: math.NaN()}).Validate(); err == nil {
		t.Error("NaN contrast accepted")
	}
	// Omitted contrast means 1.
	s, err := ParseSpec([]byte(`{"type":"binary","width":2,"height":2}`))
	if err != nil || s.contrast() != 1 {
		t.Errorf("omitted contrast: %v, %v", s.contrast(), err)
	}
}

func TestFrameToErrors(t *testing.T) {
	src, _ := Open(Spec{Type: Binary, Width: 4, Height: 2}, "")
	if err := src.FrameTo(make([]float64, 7), 0); err == nil {
		t.Error("short buffer accepted")
	}
	if err := src.FrameTo(make([]float64, 8), -1); !errors.Is(err, ErrFrameRange) {
		t.Errorf("frame -1: %v, want ErrFrameRange", err)
	}
	if src.Frames() != -1 {
		t.Errorf("Frames() = %d, want -1", src.Frames())
	}
}

type movieWant struct {
	SHA256 string      `json:"sha256"`
	Shape  []int       `json:"shape"`
	Frames [][]float64 `json:"frames"`
}

func loadMovies(t *testing.T) map[string]movieWant {
	raw, err := os.ReadFile(filepath.Join(dataDir, "movies.json"))
	if err != nil {
		t.Fatal(err)
	}
	var m map[string]movieWant
	if err := json.Unmarshal(raw, &m); err != nil {
		t.Fatal(err)
	}
	return m
}

// TestMovieRoundTrip reads numpy-written movies (testdata/stimulus/make_movies.py)
// and compares the frames with the values numpy computed.
func TestMovieRoundTrip(t *testing.T) {
	for name, w := range loadMovies(t) {
		if w.Frames == nil {
			continue
		}
		t.Run(name, func(t *testing.T) {
			src, err := Open(Spec{Type: Movie, File: name, SHA256: strings.ToUpper(w.SHA256)}, dataDir)
			if err != nil {
				t.Fatal(err)
			}
			if src.Frames() != int64(w.Shape[0]) || src.Height() != w.Shape[1] || src.Width() != w.Shape[2] {
				t.Fatalf("size %d×%d×%d, want %v", src.Frames(), src.Height(), src.Width(), w.Shape)
			}
			if src.White() || src.PixelVariance() != 0 {
				t.Error("movie claims to be white")
			}
			dst := make([]float64, src.Width()*src.Height())
			for f, want := range w.Frames {
				if err := src.FrameTo(dst, int64(f)); err != nil {
					t.Fatal(err)
				}
				for i := range want {
					if math.Abs(dst[i]-want[i]) > 1e-15 {
						t.Fatalf("frame %d pixel %d = %v, numpy %v", f, i, dst[i], want[i])
					}
				}
			}
			err = src.FrameTo(dst, src.Frames())
			if !errors.Is(err, ErrFrameRange) {
				t.Errorf("frame past the end: %v, want ErrFrameRange", err)
			}
		})
	}
}

func TestMovieErrors(t *testing.T) {
	m := loadMovies(t)
	outside := t.TempDir()
	inside := t.TempDir()
	b, _ := os.ReadFile(filepath.Join(dataDir, "movie_f8.npy"))
	os.WriteFile(filepath.Join(outside, "secret.npy"), b, 0o644)
	os.Symlink(filepath.Join(outside, "secret.npy"), filepath.Join(inside, "link.npy"))
	os.Symlink(outside, filepath.Join(inside, "dir"))
	wrong := strings.Repeat("0", 64)
	tests := []struct {
		name string
		spec Spec
		dir  string
		want string
	}{
		{"sha mismatch", Spec{Type: Movie, File: "movie_u8.npy", SHA256: wrong}, dataDir, "sha256 mismatch: expected " + wrong + ", got " + m["movie_u8.npy"].SHA256},
		{"int16", Spec{Type: Movie, File: "bad_i2.npy"}, dataDir, `dtype "<i2"`},
		{"2-D", Spec{Type: Movie, File: "bad_2d.npy"}, dataDir, "shape [4 4]"},
		{"big-endian", Spec{Type: Movie, File: "bad_big.npy"}, dataDir, `dtype ">f8"`},
		{"fortran", Spec{Type: Movie, File: "bad_fortran.npy"}, dataDir, "Fortran"},
		{"missing", Spec{Type: Movie, File: "nothing.npy"}, dataDir, "not found"},
		{"not npy", Spec{Type: Movie, File: "make_movies.py"}, dataDir, "magic"},
		{"no dir", Spec{Type: Movie, File: "movie_u8.npy"}, "", "stimulus directory"},
		{"dotdot", Spec{Type: Movie, File: "../stimulus/movie_u8.npy"}, dataDir, `".."`},
		{"absolute", Spec{Type: Movie, File: filepath.Join(outside, "secret.npy")}, inside, "absolute"},
		{"symlink out", Spec{Type: Movie, File: "link.npy"}, inside, "outside the stimulus directory"},
		{"dir symlink out", Spec{Type: Movie, File: "dir/secret.npy"}, inside, "outside the stimulus directory"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, err := Open(tc.spec, tc.dir)
			if err == nil {
				t.Fatal("no error")
			}
			if !strings.HasPrefix(err.Error(), "stimulus: ") || !strings.Contains(err.Error(), tc.want) {
				t.Fatalf("error %q, want %q", err, tc.want)
			}
		})
	}
}

func ExampleOpen() {
	spec, err := ParseSpec([]byte(`{"type":"binary","width":4,"height":2,"seed":42}`))
	if err != nil {
		fmt.Println(err)
		return
	}
	src, err := Open(spec, "")
	if err != nil {
		fmt.Println(err)
		return
	}
	frame := make([]float64, src.Width()*src.Height())
	if err := src.FrameTo(frame, 0); err != nil {
		fmt.Println(err)
		return
	}
	fmt.Println(frame, src.White(), src.PixelVariance())
	// Output: [1 -1 -1 -1 -1 1 -1 1] true 1
}

func BenchmarkFrameTo(b *testing.B) {
	for _, spec := range []Spec{
		{Type: Binary, Width: 16, Height: 16, Seed: 1},
		{Type: Ternary, Width: 16, Height: 16, Seed: 1},
		{Type: Sparse, Width: 16, Height: 16, Seed: 1, Squares: 2, Size: 2},
	} {
		b.Run(spec.Type+"_16x16", func(b *testing.B) {
			src, _ := Open(spec, "")
			dst := make([]float64, 256)
			b.ReportAllocs()
			for i := 0; b.Loop(); i++ {
				src.FrameTo(dst, int64(i))
			}
			b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/256, "ns/pixel")
		})
	}
}
