package stimulus

import (
	"bytes"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"strings"
)

// Limits on a spec; a real rig stays far below them, they stop hostile or
// mistyped specs from asking for huge frames.
const (
	MaxSide    = 1024    // width or height in pixels
	MaxPixels  = 1 << 16 // pixels per frame: online.MaxPixels (a test in stream/ingest holds them equal)
	MaxSquares = 1024    // sparse squares per frame
)

// The stimulus types.
const (
	Binary  = "binary"
	Ternary = "ternary"
	Sparse  = "sparse"
	Movie   = "movie"
)

// Spec describes one stimulus sequence.
type Spec struct {
	Type   string `json:"type"`
	Width  int    `json:"width,omitempty"`
	Height int    `json:"height,omitempty"`
	Seed   uint64 `json:"seed,omitempty"`
	// Contrast is the pixel amplitude C of the noise types; 0 means 1.
	Contrast float64 `json:"contrast,omitempty"`
	// Squares (per frame, default 1) and Size (side in pixels, default
	// 1) are for sparse noise.
	Squares int `json:"squares,omitempty"`
	Size    int `json:"size,omitempty"`
	// File (relative to the stimulus directory) and SHA256 (hex,
	// optional) are for movies.
	File   string `json:"file,omitempty"`
	SHA256 string `json:"sha256,omitempty"`
}

// ParseSpec decodes a JSON spec, rejecting unknown fields and an explicit
// zero contrast, and validates it.
func ParseSpec(data []byte) (Spec, error) {
	var s Spec
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&s); err != nil {
		return Spec{}, fmt.Errorf("stimulus: spec: %w", err)
	}
	if dec.More() {
		return Spec{}, errors.New("stimulus: spec: trailing data after the JSON object")
	}
	var raw map[string]json.RawMessage
	if json.Unmarshal(data, &raw) == nil {
		if c, ok := raw["contrast"]; ok && s.Contrast == 0 && string(c) != "null" {
			return Spec{}, errors.New("stimulus: contrast must be > 0 (omit it for 1)")
		}
	}
	if err := s.Validate(); err != nil {
		return Spec{}, err
	}
	return s, nil
}

// contrast is the effective contrast.
func (s Spec) contrast() float64 {
	if s.Contrast == 0 {
		return 1
	}
	return s.Contrast
}

func (s Spec) squares() int {
	if s.Squares == 0 {
		return 1
	}
	return s.Squares
}

func (s Spec) size() int {
	if s.Size == 0 {
		return 1
	}
	return s.Size
}

// Validate reports the first problem with the spec.
func (s Spec) Validate() error {
	switch s.Type {
	case Binary, Ternary, Sparse:
	case Movie:
		return s.validateMovie()
	case "":
		return errors.New("stimulus: spec has no type (binary, ternary, sparse or movie)")
	default:
		return fmt.Errorf("stimulus: unknown type %q (binary, ternary, sparse or movie)", s.Type)
	}
	if s.File != "" || s.SHA256 != "" {
		return fmt.Errorf("stimulus: file and sha256 are for movies, not %s noise", s.Type)
	}
	if err := checkSize(s.Width, s.Height); err != nil {
		return err
	}
	if c := s.Contrast; math.IsNaN(c) || math.IsInf(c, 0) || c < 0 {
		return fmt.Errorf("stimulus: contrast %v must be finite and > 0", c)
	}
	if s.Type != Sparse {
		if s.Squares != 0 || s.Size != 0 {
			return fmt.Errorf("stimulus: squares and size are for sparse noise, not %s", s.Type)
		}
		return nil
	}
	if s.Squares < 0 || s.Squares > MaxSquares {
		return fmt.Errorf("stimulus: squares %d must be 1…%d", s.Squares, MaxSquares)
	}
	if s.Size < 0 || s.Size > MaxSide {
		return fmt.Errorf("stimulus: size %d must be 1…%d", s.Size, MaxSide)
	}
	if z := s.size(); s.Width%z != 0 || s.Height%z != 0 {
		return fmt.Errorf("stimulus: square size %d must divide width %d and height %d", z, s.Width, s.Height)
	}
	return nil
}

func checkSize(w, h int) error {
	if w < 1 || w > MaxSide || h < 1 || h > MaxSide {
		return fmt.Errorf("stimulus: frame %d×%d: width and height must be 1…%d", w, h, MaxSide)
	}
	if w*h > MaxPixels {
		return fmt.Errorf("stimulus: frame %d×%d exceeds %d pixels", w, h, MaxPixels)
	}
	return nil
}

func (s Spec) validateMovie() error {
	if s.File == "" {
		return errors.New("stimulus: movie spec needs a file (an .npy name in the stimulus directory)")
	}
	if s.Width != 0 || s.Height != 0 || s.Seed != 0 || s.Contrast != 0 || s.Squares != 0 || s.Size != 0 {
		return errors.New("stimulus: a movie takes only file and sha256; its size comes from the file")
	}
	if s.SHA256 != "" {
		if b, err := hex.DecodeString(s.SHA256); err != nil || len(b) != 32 {
			return fmt.Errorf("stimulus: sha256 %q is not 64 hex digits", s.SHA256)
		}
	}
	return checkName(s.File)
}

// checkName refuses names that could leave the stimulus directory.
func checkName(name string) error {
	if strings.HasPrefix(name, "/") || strings.HasPrefix(name, `\`) || (len(name) > 1 && name[1] == ':') {
		return fmt.Errorf("stimulus: movie file %q is absolute; give a name relative to the stimulus directory (--stimuli)", name)
	}
	for _, el := range strings.FieldsFunc(name, func(r rune) bool { return r == '/' || r == '\\' }) {
		if el == ".." {
			return fmt.Errorf("stimulus: movie file %q contains \"..\"; put the file inside the stimulus directory (--stimuli) and name it from there", name)
		}
	}
	return nil
}
