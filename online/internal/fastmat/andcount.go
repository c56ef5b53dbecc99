package fastmat

import (
	"fmt"
	"math/bits"
)

// AndCount adds to every dst[i] the weighted count of the bits set both in
// the bit string i of x and in the masks of a number of bit planes:
//
//	dst[i] += Σ_m 2^m · Σ_w popcount(x[w·n + i] & masks[m·nw + w]),
//
// n = len(dst), w < nw words per string, m < len(masks)/nw planes. The
// words of string i lie len(dst) values apart (x holds word 0 of every
// string, then word 1, …). It counts the bit planes of a unit's spike
// counts against many lagged pixel bit strings at once, each string read
// once for all planes. The caller keeps the sums below 2³²; x shorter than
// nw·len(dst), or masks not a whole number of planes, panics. On CPUs with
// AVX-512 VPOPCNTQ eight strings at a time run in assembly, with AVX2 eight
// too (nibble table look-ups), the rest in Go with math/bits.
func AndCount(dst []uint32, x []uint64, masks []uint64, nw int) {
	n := len(dst)
	if nw <= 0 || len(masks)%nw != 0 || len(x) < nw*n {
		panic(fmt.Sprintf("fastmat: AndCount: %d strings of %d words in %d, %d masks", n, nw, len(x), len(masks)))
	}
	planes := len(masks) / nw
	if n == 0 || planes == 0 {
		return
	}
	done := 0
	switch {
	case hasAndCount8:
		if done = n &^ 15; done > 0 {
			andCount16(done, &dst[0], &x[0], n, &masks[0], nw, planes)
		}
		if n-done >= 8 {
			andCount8(8, &dst[done], &x[done], n, &masks[0], nw, planes)
			done += 8
		}
	case hasAndCount4 && nw <= 31:
		if done = n &^ 7; done > 0 {
			andCount4(done, &dst[0], &x[0], n, &masks[0], nw, planes)
		}
	}
	for i := done; i < n; i++ {
		c := 0
		for m := planes - 1; m >= 0; m-- { // Horner's scheme over the planes
			c <<= 1
			for w, mask := range masks[m*nw : (m+1)*nw] {
				c += bits.OnesCount64(x[w*n+i] & mask)
			}
		}
		dst[i] += uint32(c)
	}
}

// AndCountClass tells how AndCount counts on this CPU: 2 with AVX-512
// VPOPCNTQ, 1 with AVX2, 0 in Go.
func AndCountClass() int {
	switch {
	case hasAndCount8:
		return 2
	case hasAndCount4:
		return 1
	}
	return 0
}
