package npy

import (
	"bytes"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
)

const fixtureDir = "../../testdata/npy"

type fixture struct {
	Shape   []int     `json:"shape"`
	Descr   string    `json:"descr"`
	Fortran bool      `json:"fortran"`
	Values  []float64 `json:"values"`
}

// TestReadNumpyFixtures reads files written by numpy.save and
// numpy.lib.format.write_array (testdata/npy/make_fixtures.py) and compares
// them with the values numpy reads back (fixtures.json, written by the same
// script).
func TestReadNumpyFixtures(t *testing.T) {
	raw, err := os.ReadFile(filepath.Join(fixtureDir, "fixtures.json"))
	if err != nil {
		t.Fatal(err)
	}
	var want map[string]fixture
	if err := json.Unmarshal(raw, &want); err != nil {
		t.Fatal(err)
	}
	if len(want) < 10 {
		t.Fatalf("fixtures.json lists %d files, want 10", len(want))
	}
	for name, w := range want {
		t.Run(name, func(t *testing.T) {
			f, err := os.Open(filepath.Join(fixtureDir, name))
			if err != nil {
				t.Fatal(err)
			}
			defer f.Close()
			a, err := Read(f)
			if err != nil {
				t.Fatal(err)
			}
			if !reflect.DeepEqual(a.Shape, w.Shape) || a.Descr != w.Descr || a.Fortran != w.Fortran {
				t.Fatalf("got shape %v descr %q fortran %v, numpy says %v %q %v", a.Shape, a.Descr, a.Fortran, w.Shape, w.Descr, w.Fortran)
			}
			got := make([]float64, a.Len())
			if err := a.Float64To(got, 0); err != nil {
				t.Fatal(err)
			}
			if len(got) != len(w.Values) {
				t.Fatalf("got %d values, numpy %d", len(got), len(w.Values))
			}
			for i := range got {
				if got[i] != w.Values[i] || math.Signbit(got[i]) != math.Signbit(w.Values[i]) {
					t.Errorf("value %d: got %v, numpy %v", i, got[i], w.Values[i])
				}
			}
		})
	}
}

func header(version byte, dict string) []byte {
	b := append([]byte("\x93NUMPY"), version, 0)
	if version == 1 {
		b = append(b, byte(len(dict)), byte(len(dict)>>8))
	} else {
		b = append(b, byte(len(dict)), byte(len(dict)>>8), byte(len(dict)>>16), byte(len(dict)>>24))
	}
	return append(b, dict...)
}

// TestReadErrors: malformed and hostile inputs give an error naming the
// problem, never a panic (format rules from the NPY format specification,
// numpy.lib.format documentation).
func TestReadErrors(t *testing.T) {
	okDict := "{'descr': '<f8', 'fortran_order': False, 'shape': (2,), }\n"
	huge := []byte("\x93NUMPY\x02\x00\xff\xff\xff\x7f")
	tests := []struct {
		name string
		in   []byte
		want string
	}{
		{"empty", nil, "preamble"},
		{"bad magic", []byte("\x93NUMPX\x01\x00\x00\x00"), "magic"},
		{"version 4", []byte("\x93NUMPY\x04\x00\x00\x00"), "version 4.0"},
		{"header over limit", huge, "exceeds limit"},
		{"header truncated", header(1, okDict)[:20], "header"},
		{"data truncated", append(header(1, okDict), 1, 2, 3), "truncated"},
		{"structured", header(1, "{'descr': [('a', '<f8')], 'fortran_order': False, 'shape': (1,), }"), "structured"},
		{"object dtype", header(1, "{'descr': '|O', 'fortran_order': False, 'shape': (1,), }"), "dtype"},
		{"complex dtype", header(1, "{'descr': '<c16', 'fortran_order': False, 'shape': (1,), }"), "dtype"},
		{"missing shape", header(1, "{'descr': '<f8', 'fortran_order': False}"), "lacks"},
		{"unknown key", header(1, "{'descr': '<f8', 'x': 1}"), "unexpected header key"},
		{"negative dim", header(1, "{'descr': '<f8', 'fortran_order': False, 'shape': (-1,), }"), "non-negative"},
		{"huge shape", header(1, "{'descr': '<f8', 'fortran_order': False, 'shape': (100000000000, 100000000000), }"), "data limit"},
		{"huge dim", header(1, "{'descr': '<f8', 'fortran_order': False, 'shape': (99999999999999999999,), }"), "too large"},
		{"bad bool", header(1, "{'descr': '<f8', 'fortran_order': Maybe, 'shape': (1,), }"), "True or False"},
		{"unterminated", header(1, "{'descr': '<f8"), "unterminated"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, err := Read(bytes.NewReader(tc.in))
			if err == nil {
				t.Fatal("no error")
			}
			if !strings.HasPrefix(err.Error(), "npy: ") || !strings.Contains(err.Error(), tc.want) {
				t.Fatalf("error %q, want prefix \"npy: \" and %q", err, tc.want)
			}
		})
	}
}

// TestWriteFormat checks the header against the NPY format specification
// (numpy.lib.format docs: version 1.0, little-endian uint16 header length,
// total header a multiple of 64 bytes ending in '\n').
func TestWriteFormat(t *testing.T) {
	var buf bytes.Buffer
	if err := Write(&buf, []int{2, 3}, []float64{1, 2, 3, 4, 5, 6}); err != nil {
		t.Fatal(err)
	}
	b := buf.Bytes()
	hlen := int(b[8]) | int(b[9])<<8
	if (10+hlen)%64 != 0 || b[10+hlen-1] != '\n' || len(b) != 10+hlen+48 {
		t.Fatalf("header length %d, file %d bytes: not 64-aligned or no trailing newline", hlen, len(b))
	}
	if !bytes.HasPrefix(b[10:], []byte("{'descr': '<f8', 'fortran_order': False, 'shape': (2, 3), }")) {
		t.Fatalf("header %q", b[10:10+hlen])
	}
	for _, tc := range []struct {
		shape []int
		n     int
	}{{[]int{2, 3}, 5}, {[]int{-1}, 0}, {[]int{1 << 62, 1 << 62}, 0}} {
		if err := Write(&buf, tc.shape, make([]float64, tc.n)); err == nil {
			t.Errorf("shape %v with %d values: no error", tc.shape, tc.n)
		}
	}
}

func TestRoundTrip(t *testing.T) {
	tests := []struct {
		shape []int
		data  []float64
	}{
		{[]int{}, []float64{math.Pi}},
		{[]int{3}, []float64{-1, 0, math.Inf(1)}},
		{[]int{2, 0}, nil},
		{[]int{2, 1, 2}, []float64{1e-310, 2, 3, -4}},
	}
	for _, tc := range tests {
		var buf bytes.Buffer
		if err := Write(&buf, tc.shape, tc.data); err != nil {
			t.Fatal(err)
		}
		a, err := Read(&buf)
		if err != nil {
			t.Fatal(err)
		}
		got := make([]float64, a.Len())
		a.Float64To(got, 0)
		if !reflect.DeepEqual(a.Shape, tc.shape) || len(got) != len(tc.data) {
			t.Fatalf("shape %v len %d, want %v %d", a.Shape, len(got), tc.shape, len(tc.data))
		}
		for i := range got {
			if got[i] != tc.data[i] {
				t.Errorf("%v[%d] = %v, want %v", tc.shape, i, got[i], tc.data[i])
			}
		}
	}
}

// TestNumpyReadsOurFiles writes files and reads them with numpy.load via
// testdata/npy/check_written.py (Debian's /usr/bin/python3 with numpy).
func TestNumpyReadsOurFiles(t *testing.T) {
	py := "/usr/bin/python3"
	if _, err := os.Stat(py); err != nil {
		t.Skip("skipping: /usr/bin/python3 (Debian's, with numpy) not present; the committed numpy fixtures are still checked by TestReadNumpyFixtures")
	}
	if err := exec.Command(py, "-c", "import numpy").Run(); err != nil {
		t.Skip("skipping: numpy not importable by /usr/bin/python3")
	}
	dir := t.TempDir()
	tests := []struct {
		name  string
		shape []int
		f64   []float64
		f32   []float32
	}{
		{"f8.npy", []int{2, 3}, []float64{0.5, -1, 1e300, 4, 5, -0.125}, nil},
		{"f8_1d.npy", []int{4}, []float64{1, 2, 3, 4}, nil},
		{"f4.npy", []int{3, 1}, nil, []float32{1.5, -2, 0.25}},
	}
	for _, tc := range tests {
		path := filepath.Join(dir, tc.name)
		f, err := os.Create(path)
		if err != nil {
			t.Fatal(err)
		}
		wantDescr, want := "<f8", tc.f64
		if tc.f32 != nil {
			err = Write32(f, tc.shape, tc.f32)
			wantDescr, want = "<f4", nil
			for _, v := range tc.f32 {
				want = append(want, float64(v))
			}
		} else {
			err = Write(f, tc.shape, tc.f64)
		}
		f.Close()
		if err != nil {
			t.Fatal(err)
		}
		out, err := exec.Command(py, filepath.Join(fixtureDir, "check_written.py"), path).Output()
		if err != nil {
			t.Fatalf("%s: numpy.load failed: %v", tc.name, err)
		}
		var got struct {
			Descr  string    `json:"descr"`
			Shape  []int     `json:"shape"`
			Values []float64 `json:"values"`
		}
		if err := json.Unmarshal(out, &got); err != nil {
			t.Fatal(err)
		}
		if got.Descr != wantDescr || !reflect.DeepEqual(got.Shape, tc.shape) || !reflect.DeepEqual(got.Values, want) {
			t.Errorf("%s: numpy read %+v, wrote %s %v %v", tc.name, got, wantDescr, tc.shape, want)
		}
	}
}

func FuzzRead(f *testing.F) {
	for _, name := range []string{"f8_2x3.npy", "u1_2x2x3.npy", "f8_v2.npy", "f8_big.npy"} {
		b, err := os.ReadFile(filepath.Join(fixtureDir, name))
		if err != nil {
			f.Fatal(err)
		}
		f.Add(b)
	}
	f.Fuzz(func(t *testing.T, b []byte) {
		a, err := ReadLimit(bytes.NewReader(b), 1<<20)
		if err != nil {
			return
		}
		// Property: what was read converts, and writing it back as
		// float64 and reading again keeps shape and values.
		if a.Len()*a.ItemSize() != len(a.Data) {
			t.Fatalf("len %d × %d != %d data bytes", a.Len(), a.ItemSize(), len(a.Data))
		}
		vals := make([]float64, a.Len())
		if err := a.Float64To(vals, 0); err != nil {
			return // float16 and the like: read but not converted
		}
		var buf bytes.Buffer
		if err := Write(&buf, a.Shape, vals); err != nil {
			t.Fatalf("rewrite: %v", err)
		}
		b2, err := Read(&buf)
		if err != nil {
			t.Fatalf("reread: %v", err)
		}
		if !reflect.DeepEqual(b2.Shape, a.Shape) {
			t.Fatalf("shape %v became %v", a.Shape, b2.Shape)
		}
	})
}

func ExampleRead() {
	var buf bytes.Buffer
	_ = Write(&buf, []int{2, 2}, []float64{1, 2, 3, 4})
	a, err := Read(&buf)
	if err != nil {
		panic(err)
	}
	v := make([]float64, a.Len())
	_ = a.Float64To(v, 0)
	fmt.Println(a.Descr, a.Shape, v)
	// Output: <f8 [2 2] [1 2 3 4]
}
