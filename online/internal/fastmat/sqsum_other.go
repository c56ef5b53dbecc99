//go:build !amd64

package fastmat

// hasSqSum16 is false: ShiftedSquares runs in Go.
const hasSqSum16 = false

func sqSum16(n int, c float64, p, e, sq *float64) float64 {
	panic("fastmat: sqSum16 without assembly")
}
