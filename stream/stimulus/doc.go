// Package stimulus turns a small stimulus spec into frames: procedural noise
// (binary, ternary and sparse) addressed by frame index and reproducible from
// the spec alone, and movies read from NPY files.
//
// # Specs
//
// A Spec is written as JSON, for example
//
//	{"type":"binary","width":16,"height":16,"seed":42,"contrast":1}
//	{"type":"ternary","width":32,"height":24,"seed":7,"contrast":0.5}
//	{"type":"sparse","width":40,"height":30,"seed":9,"squares":2,"size":2}
//	{"type":"movie","file":"clouds.npy","sha256":"…"}
//
// ParseSpec decodes such JSON strictly (unknown fields are errors);
// Validate checks a Spec built in Go. Limits: width and height 1…1024
// (MaxSide), at most 1<<16 pixels per frame (MaxPixels, the mapper's limit), contrast finite and
// > 0. An omitted contrast (0 in a Spec built in Go) means 1; a contrast
// given explicitly as 0 in JSON is an error. For sparse noise, size
// (default 1) must divide width and height, and squares (default 1) is
// 1…1024.
//
// # Pseudorandom numbers
//
// All noise comes from SplitMix64 (Steele, Lea & Flood 2014, "Fast
// splittable pseudorandom number generators"), used by random access: output
// number n (counting from 0) of the generator seeded with seed is
//
//	z = seed + (n+1)·0x9E3779B97F4A7C15
//	z = (z ^ (z >> 30)) · 0xBF58476D1CE4E5B9
//	z = (z ^ (z >> 27)) · 0x94D049BB133111EB
//	out(n) = z ^ (z >> 31)
//
// with all arithmetic on unsigned 64-bit integers modulo 2^64 (so the index
// n itself is also taken modulo 2^64). "Uniform choice among m" below means
// k = floor(out(n)·m / 2^64), the high 64 bits of the 128-bit product, which
// is 0…m−1.
//
// In a W×H frame, pixel (row r, column c), 0 ≤ r < H, 0 ≤ c < W, is stored
// at r·W + c; frames are numbered f = 0, 1, 2, … and contrast is C.
//
// # Binary dense noise ("binary")
//
// Pixel (f, r, c) uses n = f·W·H + r·W + c. It is +C when the top bit
// (bit 63) of out(n) is set, otherwise −C. Mean 0, variance C²; pixels are
// independent across space and frames. White() is true.
//
// # Ternary dense noise ("ternary")
//
// Pixel (f, r, c) uses n = f·W·H + r·W + c and k = floor(3·out(n) / 2^64):
// k = 0 gives −C, k = 1 gives 0, k = 2 gives +C. Since 2^64 = 3q + 1, the
// value −C has probability (q+1)/2^64 and 0 and +C have q/2^64 each; so the
// mean is −C/2^64 and the variance is C²·(2/3 + 1/(3·2^64)) − C²/2^128,
// which is 2C²/3 in float64. Pixels are independent. White() is true.
//
// # Sparse noise ("sparse")
//
// The frame is a grid of cells of S×S pixels (S = size), W/S cells across
// and H/S down, M = (W/S)·(H/S) cells, cell (i, j) covering rows
// i·S…i·S+S−1 and columns j·S…j·S+S−1. Every frame starts at 0 (the
// background) and K = squares squares are drawn on it, in order j = 0…K−1.
// Square j of frame f uses the outputs n = 2·(f·K + j) and n+1:
//
//   - cell: m = floor(out(n)·M / 2^64), the cell at row m / (W/S) and
//     column m mod (W/S) (integer division), i.e. cells numbered row-major;
//   - polarity: +C when the top bit of out(n+1) is set, otherwise −C.
//
// The square sets all pixels of its cell to its polarity. Overlap rule: a
// later square overwrites an earlier one in the same cell, so a cell holds
// the polarity of the last square drawn on it. A pixel is therefore non-zero
// with probability p = 1 − (1 − 1/M)^K, and then ±C with equal probability
// independently of everything else, so the mean is 0 and the variance is
// C²·(1 − (1 − 1/M)^K) (the cell choice deviates from exactly 1/M by less
// than 2^-64). Different cells and different frames are uncorrelated
// (not independent: at most K cells are lit). White() is true only when
// S = 1, where distinct pixels are distinct cells; for S > 1 the pixels of
// one cell are identical and White() is false, though PixelVariance still
// gives the variance above.
//
// # Movies ("movie")
//
// A movie is an NPY file of shape (T, H, W), C order, with dtype uint8
// ('|u1'), little-endian float32 ('<f4') or float64 ('<f8'); anything else
// is rejected. The file name is relative to the stimulus directory given to
// Open; absolute names, ".." elements and names that resolve outside that
// directory (symbolic links included) are refused. When the spec gives
// sha256, the file's SHA-256 (hex) must match. The frames stay in memory in
// their stored dtype and are converted by FrameTo: a uint8 value v becomes
// v/127.5 − 1 (0 → −1, 255 → +1), floats are used as stored. An index
// outside 0…T−1 gives an error wrapping ErrFrameRange. Movies are not white
// (PixelVariance 0).
//
// # Concurrency
//
// A Source returned by Open is immutable: FrameTo may be called by any
// number of goroutines at once. Spec values are plain data.
package stimulus
