package online

import (
	"encoding/json"
	"math"
	"strconv"
	"unsafe"
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

// MarshalJSON encodes the whole array at once, as the elements would be one
// by one (null for a nil slice and for non-finite values): a snapshot holds
// millions of floats, and a method call per element cost most of its
// encoding.
func (v Floats) MarshalJSON() ([]byte, error) {
	if v == nil {
		return []byte("null"), nil
	}
	b := make([]byte, 0, 2+len(v)*12)
	b = append(b, '[')
	for i, f := range v {
		if i > 0 {
			b = append(b, ',')
		}
		x := float64(f)
		if math.IsNaN(x) || math.IsInf(x, 0) {
			b = append(b, "null"...)
			continue
		}
		b = strconv.AppendFloat(b, x, 'g', -1, 64)
	}
	return append(b, ']'), nil
}

// newFloatArrays returns k new arrays of n zeros each, as Floats and as
// []float64 over the same memory (Float is a float64), so that an update
// computes each unit's estimates where the snapshot keeps them instead of
// copying them there. The k arrays share one allocation.
func newFloatArrays(k, n int) ([]Floats, [][]float64) {
	all := make(Floats, k*n)
	fs, vs := make([]Floats, k), make([][]float64, k)
	for i := range k {
		fs[i] = all[i*n : (i+1)*n : (i+1)*n]
		if n > 0 {
			vs[i] = unsafe.Slice((*float64)(unsafe.Pointer(&fs[i][0])), n)
		} else {
			vs[i] = []float64{}
		}
	}
	return fs, vs
}

// FloatsOf copies a []float64 into Floats.
func FloatsOf(v []float64) Floats {
	out := make(Floats, len(v))
	for i, x := range v {
		out[i] = Float(x)
	}
	return out
}
