// Package stimulus turns a small stimulus spec into frames: procedural noise
// (binary, ternary and sparse) addressed by frame index and reproducible from
// the spec alone, and movies read from NPY files.
package stimulus
