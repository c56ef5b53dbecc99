package online

import "math"

// Geometry is the optional screen geometry that converts stimulus pixels to
// degrees of visual angle.
type Geometry struct {
	DistanceCM  float64 `json:"distance_cm"`   // eye to screen
	PixelSizeCM float64 `json:"pixel_size_cm"` // one stimulus pixel on the screen
}

// DegreesPerPixel is the visual angle of one stimulus pixel at the screen centre.
func (g Geometry) DegreesPerPixel() float64 {
	if g.DistanceCM <= 0 || g.PixelSizeCM <= 0 {
		return math.NaN()
	}
	return 2 * math.Atan(g.PixelSizeCM/(2*g.DistanceCM)) * 180 / math.Pi
}
