package fastmat

import "math"

// ShiftedSquares forms v_j = p[j] + c·e[j] for j < len(sq), adds v_j² to
// sq[j] and returns Σ_j v_j² (p and e at least as long as sq; shorter
// panics). It is one row of the diagonal of M² for M = P + c·e·eᵀ, P kept
// as its lower triangle: the row's squares go to both the row's and the
// columns' sums.
//
// Every step is fused (one rounding each: v_j, sq[j] and the sum's terms),
// and the sum runs in 16 interleaved partial sums over the blocks of 16,
// added in a fixed order, then the remaining values one by one. The
// assembly (AVX2 and FMA) and the Go path follow the same order, so the
// result is the same bit for bit on every CPU.
func ShiftedSquares(sq, p, e []float64, c float64) float64 {
	n := len(sq)
	p, e = p[:n], e[:n]
	blocks := n &^ 15
	var s float64
	if blocks > 0 {
		if hasSqSum16 {
			s = sqSum16(blocks, c, &p[0], &e[0], &sq[0])
		} else {
			s = sqSum16Go(sq[:blocks], p[:blocks], e[:blocks], c)
		}
	}
	for j := blocks; j < n; j++ {
		v := math.FMA(c, e[j], p[j])
		sq[j] = math.FMA(v, v, sq[j])
		s = math.FMA(v, v, s)
	}
	return s
}

// sqSum16Go is sqSum16 in Go: len(sq) a multiple of 16, partial sum k
// taking the values j ≡ k (mod 16), summed as the assembly sums its
// registers.
func sqSum16Go(sq, p, e []float64, c float64) float64 {
	var acc [16]float64
	for j := 0; j < len(sq); j += 16 {
		for k := range 16 {
			v := math.FMA(c, e[j+k], p[j+k])
			sq[j+k] = math.FMA(v, v, sq[j+k])
			acc[k] = math.FMA(v, v, acc[k])
		}
	}
	// Registers Y0…Y3 hold acc[0:4], acc[4:8], acc[8:12], acc[12:16]:
	// (Y0+Y1) + (Y2+Y3), then the high half onto the low, then the two
	// remaining lanes.
	var t [4]float64
	for k := range 4 {
		t[k] = (acc[k] + acc[4+k]) + (acc[8+k] + acc[12+k])
	}
	return (t[0] + t[2]) + (t[1] + t[3])
}
