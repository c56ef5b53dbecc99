package fastmat

import (
	"math"
	"math/rand/v2"
	"testing"
)

// TestShiftedSquares checks ShiftedSquares against its definition summed in
// order (v = p + c·e, sq += v², Σ v²; common practice, no source) within the
// round-off of the sum, and the assembly blocks against the Go path bit for
// bit, at lengths around the block size.
func TestShiftedSquares(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	const c = -0.37
	for _, n := range []int{0, 1, 15, 16, 17, 31, 32, 33, 100, 3071} {
		p, e, sq := make([]float64, n+3), make([]float64, n+3), make([]float64, n)
		for i := range p {
			// Magnitudes that differ from lane to lane, so that a
			// different order of the partial sums rounds differently.
			scale := math.Ldexp(1, 7*(i%5)-10)
			p[i], e[i] = scale*rng.NormFloat64(), scale*rng.NormFloat64()
		}
		for i := range sq {
			sq[i] = rng.Float64()
		}
		wantSq := make([]float64, n)
		sizeSq := make([]float64, n)
		var want, size float64
		for j := range n {
			v := p[j] + c*e[j]
			wantSq[j] = sq[j] + v*v
			want += v * v
			// v's terms bound its round-off, v² is within 2|v| of it.
			terms := math.Abs(p[j]) + math.Abs(c*e[j])
			sizeSq[j] = sq[j] + terms*terms
			size += terms * terms
		}
		goSq := append([]float64(nil), sq...)
		got := ShiftedSquares(sq, p, e, c) // p and e longer than sq: only len(sq) is read
		for j := range n {
			// A few roundings of terms of size sq + v².
			if math.Abs(sq[j]-wantSq[j]) > 1e-15*sizeSq[j] {
				t.Fatalf("n = %d: sq[%d] = %v, want %v", n, j, sq[j], wantSq[j])
			}
		}
		// n roundings of positive terms at most (Higham, Accuracy and
		// Stability of Numerical Algorithms, §4.2: |error| ≤ (n−1)u Σ|x|).
		if math.Abs(got-want) > float64(n+1)*1.2e-16*size {
			t.Fatalf("n = %d: sum %v, want %v", n, got, want)
		}
		blocks := n &^ 15
		var goSum float64
		if blocks > 0 {
			goSum = sqSum16Go(goSq[:blocks], p[:blocks], e[:blocks], c)
		}
		for j := blocks; j < n; j++ {
			v := math.FMA(c, e[j], p[j])
			goSq[j] = math.FMA(v, v, goSq[j])
			goSum = math.FMA(v, v, goSum)
		}
		if math.Float64bits(got) != math.Float64bits(goSum) {
			t.Fatalf("n = %d: sum %v, Go path %v", n, got, goSum)
		}
		for j := range n {
			if math.Float64bits(sq[j]) != math.Float64bits(goSq[j]) {
				t.Fatalf("n = %d: sq[%d] = %v, Go path %v", n, j, sq[j], goSq[j])
			}
		}
	}
}
