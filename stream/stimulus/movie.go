package stimulus

import (
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"strings"

	"livefield/stream/npy"
)

// MaxMovieBytes bounds the data of one movie file (2 GiB).
const MaxMovieBytes = 1 << 31

type movie struct {
	a       *npy.Array
	t, w, h int
	u8      bool
}

func openMovie(spec Spec, dir string) (Source, error) {
	if dir == "" {
		return nil, errors.New("stimulus: movie needs a stimulus directory (--stimuli)")
	}
	root, err := os.OpenRoot(dir)
	if err != nil {
		return nil, fmt.Errorf("stimulus: stimulus directory: %w", err)
	}
	defer root.Close()
	f, err := root.Open(spec.File)
	if err != nil {
		if errors.Is(err, fs.ErrNotExist) {
			return nil, fmt.Errorf("stimulus: movie %q not found in %s", spec.File, dir)
		}
		if strings.Contains(err.Error(), "escapes") {
			return nil, fmt.Errorf("stimulus: movie %q resolves outside the stimulus directory %s; copy the file into it", spec.File, dir)
		}
		return nil, fmt.Errorf("stimulus: movie: %w", err)
	}
	defer f.Close()
	h := sha256.New()
	r := io.TeeReader(f, h)
	a, err := npy.ReadLimit(r, MaxMovieBytes)
	if err != nil {
		return nil, fmt.Errorf("stimulus: movie %q: %w", spec.File, err)
	}
	if spec.SHA256 != "" {
		if _, err := io.Copy(h, f); err != nil {
			return nil, fmt.Errorf("stimulus: movie %q: %w", spec.File, err)
		}
		got := hex.EncodeToString(h.Sum(nil))
		if !strings.EqualFold(got, spec.SHA256) {
			return nil, fmt.Errorf("stimulus: movie %q: sha256 mismatch: expected %s, got %s", spec.File, strings.ToLower(spec.SHA256), got)
		}
	}
	return newMovie(spec.File, a)
}

func newMovie(name string, a *npy.Array) (*movie, error) {
	switch a.Descr {
	case "|u1", "<u1", "<f4", "<f8":
	default:
		return nil, fmt.Errorf("stimulus: movie %q has dtype %q; use uint8, little-endian float32 or float64", name, a.Descr)
	}
	if a.Fortran {
		return nil, fmt.Errorf("stimulus: movie %q is in Fortran order; save it in C order", name)
	}
	if len(a.Shape) != 3 {
		return nil, fmt.Errorf("stimulus: movie %q has shape %v; want (frames, height, width)", name, a.Shape)
	}
	m := &movie{a: a, t: a.Shape[0], h: a.Shape[1], w: a.Shape[2], u8: a.ItemSize() == 1}
	if err := checkSize(m.w, m.h); err != nil {
		return nil, fmt.Errorf("stimulus: movie %q: %w", name, err)
	}
	if m.t < 1 {
		return nil, fmt.Errorf("stimulus: movie %q has no frames", name)
	}
	return m, nil
}

func (m *movie) Width() int             { return m.w }
func (m *movie) Height() int            { return m.h }
func (m *movie) Frames() int64          { return int64(m.t) }
func (m *movie) White() bool            { return false }
func (m *movie) PixelVariance() float64 { return 0 }

func (m *movie) FrameTo(dst []float64, f int64) error {
	p := m.w * m.h
	if len(dst) != p {
		return fmt.Errorf("stimulus: frame buffer has %d values, want %d×%d = %d", len(dst), m.w, m.h, p)
	}
	if f < 0 || f >= int64(m.t) {
		return fmt.Errorf("stimulus: frame %d of a %d-frame movie: %w", f, m.t, ErrFrameRange)
	}
	if err := m.a.Float64To(dst, int(f)*p); err != nil {
		return fmt.Errorf("stimulus: %w", err)
	}
	if m.u8 {
		for i, v := range dst {
			dst[i] = v/127.5 - 1
		}
	}
	return nil
}
