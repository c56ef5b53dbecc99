package fastmat

import (
	"fmt"
	"math/bits"
)

// AndCount adds to every dst[i] the number of bits set both in mask and in
// the bit string i of x, shifted left by shift:
//
//	dst[i] += Σ_w popcount(x[w·n + i] & mask[w]) << shift,  n = len(dst),
//
// the words w < len(mask) of string i lying len(dst) values apart (x holds
// word 0 of every string, then word 1, …). It counts one bit plane of spike
// masks against many lagged pixel bit strings at once. The caller keeps the
// sums below 2³²; x shorter than len(mask)·len(dst) panics. On CPUs with
// AVX-512 VPOPCNTQ eight strings at a time run in assembly, with AVX2 four
// (nibble table look-ups), the rest in Go with math/bits.
func AndCount(dst []uint32, x []uint64, mask []uint64, shift uint) {
	n, nw := len(dst), len(mask)
	if len(x) < nw*n {
		panic(fmt.Sprintf("fastmat: AndCount: len(x) = %d < %d·%d", len(x), nw, n))
	}
	if n == 0 || nw == 0 {
		return
	}
	done := 0
	switch {
	case hasAndCount8:
		if done = n &^ 7; done > 0 {
			andCount8(done, &dst[0], &x[0], n, &mask[0], nw, shift)
		}
	case hasAndCount4 && nw <= 31:
		if done = n &^ 3; done > 0 {
			andCount4(done, &dst[0], &x[0], n, &mask[0], nw, shift)
		}
	}
	if done == n {
		return
	}
	if nw == 4 {
		andCountGo4(dst[done:], x[done:n], x[n+done:2*n], x[2*n+done:3*n], x[3*n+done:4*n], (*[4]uint64)(mask), shift)
		return
	}
	for i := done; i < n; i++ {
		c := 0
		for w, m := range mask {
			c += bits.OnesCount64(x[w*n+i] & m)
		}
		dst[i] += uint32(c) << shift
	}
}

// andCountGo4 is AndCount's Go loop for strings of four words (a batch of
// 256 bins), with the mask in registers.
func andCountGo4(dst []uint32, x0, x1, x2, x3 []uint64, m *[4]uint64, shift uint) {
	m0, m1, m2, m3 := m[0], m[1], m[2], m[3]
	x0, x1, x2, x3 = x0[:len(dst)], x1[:len(dst)], x2[:len(dst)], x3[:len(dst)]
	for i := range dst {
		c := bits.OnesCount64(x0[i]&m0) + bits.OnesCount64(x1[i]&m1) +
			bits.OnesCount64(x2[i]&m2) + bits.OnesCount64(x3[i]&m3)
		dst[i] += uint32(c) << shift
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
