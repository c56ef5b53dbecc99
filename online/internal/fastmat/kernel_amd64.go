package fastmat

import "golang.org/x/sys/cpu"

// kernels lists the micro-kernels this CPU can run, fastest first.
var kernels = func() []microKernel {
	var ks []microKernel
	if cpu.X86.HasAVX512F {
		ks = append(ks, microKernel{name: "avx512", mr: 12, nr: 16, fn: kern12x16})
	}
	if cpu.X86.HasAVX2 && cpu.X86.HasFMA {
		ks = append(ks, microKernel{name: "avx2", mr: 4, nr: 12, fn: kern4x12})
	}
	return ks
}()

// kern4x12 adds alpha times the 4×12 product of four rows of X (element
// (i, p) at x + i·rs + p·ks, k values each) and the packed panel y (k rows
// of 12) to c (stride ldc), with AVX2 and FMA. k must be positive.
//
//go:noescape
func kern4x12(k int, x *float64, rs, ks int, y *float64, c *float64, ldc int, alpha float64)

// kern12x16 is the same for 12 rows and panels of 16, with AVX-512.
//
//go:noescape
func kern12x16(k int, x *float64, rs, ks int, y *float64, c *float64, ldc int, alpha float64)

// hasAxpy16 tells whether axpy16 can run (AVX2 and FMA).
var hasAxpy16 = cpu.X86.HasAVX2 && cpu.X86.HasFMA

// axpy16 adds alpha·x to y over n values, n a positive multiple of 16,
// with AVX2 and FMA.
//
//go:noescape
func axpy16(n int, alpha float64, x *float64, y *float64)

// axpy4x16 adds a[0]·x0 + a[1]·x1 + a[2]·x2 + a[3]·x3 to y over n values,
// n a positive multiple of 16, with AVX2 and FMA.
//
//go:noescape
func axpy4x16(n int, a *[4]float64, x0, x1, x2, x3 *float64, y *float64)

// hasAndCount8 tells whether andCount8 can run (AVX-512 with VPOPCNTQ).
var hasAndCount8 = cpu.X86.HasAVX512F && cpu.X86.HasAVX512VPOPCNTDQ

// andCount8 adds to dst[i], for i < n (a positive multiple of 8),
// Σ_{m<planes} 2^m Σ_{w<nw} popcount(x[w·stride+i] & masks[m·nw+w]), eight
// strings at a time with AVX-512 VPOPCNTQ. nw and planes must be positive.
//
//go:noescape
func andCount8(n int, dst *uint32, x *uint64, stride int, masks *uint64, nw, planes int)

// andCount16 is andCount8 for n a positive multiple of 16, sixteen strings
// at a time as two independent sets of eight.
//
//go:noescape
func andCount16(n int, dst *uint32, x *uint64, stride int, masks *uint64, nw, planes int)

// hasAndCount4 tells whether andCount4 can run (AVX2).
var hasAndCount4 = cpu.X86.HasAVX2

// andCount4 is andCount8 with AVX2, eight strings at a time as two sets of
// four (population counts of nibbles by table look-up, bytes
// summed by VPSADBW). nw must be 1…31 (a byte holds the sum of 8·nw bits)
// and planes positive.
//
//go:noescape
func andCount4(n int, dst *uint32, x *uint64, stride int, masks *uint64, nw, planes int)
