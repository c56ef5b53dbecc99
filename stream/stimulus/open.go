package stimulus

import (
	"errors"
)

// ErrFrameRange is wrapped by FrameTo errors for a frame index outside the
// source.
var ErrFrameRange = errors.New("frame index out of range")

// Open validates spec and returns its source. dir is the stimulus directory
// in which movie files are looked up; it is unused for noise.
func Open(spec Spec, dir string) (Source, error) {
	if err := spec.Validate(); err != nil {
		return nil, err
	}
	if spec.Type == Movie {
		return openMovie(spec, dir)
	}
	return newNoise(spec), nil
}
