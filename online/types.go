package online

import (
	"encoding/json"
	"math"
	"strconv"
)

// Float is a float64 that encodes NaN and ±Inf as JSON null, so that one
// undefined statistic never breaks a whole update.
type Float float64

// MarshalJSON encodes non-finite values as null.
func (f Float) MarshalJSON() ([]byte, error) {
	v := float64(f)
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return []byte("null"), nil
	}
	return strconv.AppendFloat(nil, v, 'g', -1, 64), nil
}

// UnmarshalJSON reads null as NaN.
func (f *Float) UnmarshalJSON(b []byte) error {
	if string(b) == "null" {
		*f = Float(math.NaN())
		return nil
	}
	var v float64
	if err := json.Unmarshal(b, &v); err != nil {
		return err
	}
	*f = Float(v)
	return nil
}

// Floats is a slice of Float for maps and profiles.
type Floats []Float

// FloatsOf copies a []float64 into Floats.
func FloatsOf(v []float64) Floats {
	out := make(Floats, len(v))
	for i, x := range v {
		out[i] = Float(x)
	}
	return out
}

// Status is the plain-language state of one unit's estimate.
type Status string

// The unit states, in the order a unit normally passes through them.
const (
	// Collecting: too few spikes to say anything yet.
	Collecting Status = "collecting"
	// Emerging: the field is significant but not yet reliable.
	Emerging Status = "emerging"
	// Reliable: significant and its split-half reliability has reached the target.
	Reliable Status = "reliable"
	// NoField: enough spikes, and still no significant linear field.
	NoField Status = "no field"
)

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
