package online

import (
	"fmt"
	"math"
)

// Size limits of a mapping block, one set for the wire decoders, the mapper
// and the README.
const (
	// MaxPixels bounds width×height of a stimulus frame.
	MaxPixels = 1 << 16
	// MaxLags bounds the lags kept per bin.
	MaxLags = 64
	// MaxDim bounds D = pixels × lags: the ridge keeps a (D+1)² matrix,
	// about 2 GB at the bound (maxRidgeDim).
	MaxDim = maxRidgeDim
)

// MinLambda is the smallest ridge penalty accepted, in units of the pixel
// variance (the Gram matrix's diagonal grows by one pixel variance per bin).
// The recursion starts from P = I/λ and reaches P ≈ I/(n·variance); below
// this floor its round-off grows like the ratio of the two (a relative error
// near 4e-6 at λ = 1e-8 after minutes), above it the live and batch solutions
// agree to 1e-9 after an hour at 60 Hz.
const MinLambda = 1e-3

// checkSizes refuses a frame, lag count or dimension beyond the limits with
// a message that says what would fit.
func checkSizes(width, height, lags int) error {
	if width <= 0 || height <= 0 {
		return fmt.Errorf("%w: frame %d×%d (need positive sides)", ErrConfig, width, height)
	}
	pixels := width * height
	if pixels > MaxPixels {
		return fmt.Errorf("%w: frame %d×%d has %d pixels, at most %d: use a coarser grid", ErrConfig, width, height, pixels, MaxPixels)
	}
	if lags < 1 || lags > MaxLags {
		return fmt.Errorf("%w: lags %d (need 1…%d)", ErrConfig, lags, MaxLags)
	}
	if d := pixels * lags; d > MaxDim {
		fitLags := MaxDim / pixels
		side := int(math.Sqrt(float64(MaxDim / lags)))
		msg := fmt.Sprintf("frame %d×%d with %d lags is D = %d, at most %d: ", width, height, lags, d, MaxDim)
		if fitLags >= 1 {
			msg += fmt.Sprintf("at %d×%d use at most %d lags, or a grid of at most %d×%d at %d lags", width, height, fitLags, side, side, lags)
		} else {
			msg += fmt.Sprintf("use a grid of at most %d×%d at %d lags", side, side, lags)
		}
		return fmt.Errorf("%w: %s", ErrConfig, msg)
	}
	return nil
}

// lambdaScale is the pixel variance the penalty is measured in, 1 when it
// is unknown.
func lambdaScale(variance float64) float64 {
	if variance > 0 && !math.IsInf(variance, 0) {
		return variance
	}
	return 1
}
