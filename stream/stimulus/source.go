package stimulus

// Source gives the frames of one stimulus sequence by frame index.
//
// A Source is safe for concurrent use by several goroutines once opened.
type Source interface {
	// Width and Height are the frame size in stimulus pixels.
	Width() int
	Height() int
	// Frames is the number of frames the source holds, or -1 when any
	// non-negative index is valid (procedural noise).
	Frames() int64
	// FrameTo writes frame f, row-major (row r, column c at r*Width()+c),
	// into dst, which must have length Width()*Height(). It returns an
	// error for an index outside the source.
	FrameTo(dst []float64, f int64) error
	// White reports whether pixels are independent across space and frames
	// with a known variance (the noise types). Movies are not white.
	White() bool
	// PixelVariance is the variance of one pixel of a white source
	// (0 when the source is not white).
	PixelVariance() float64
}
