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

// kern4x12 adds alpha times the 4×12 product of four rows of x (stride ldx,
// k values each) and the packed panel y (k rows of 12) to c (stride ldc),
// with AVX2 and FMA. k must be positive.
//
//go:noescape
func kern4x12(k int, x *float64, ldx int, y *float64, c *float64, ldc int, alpha float64)

// kern12x16 is the same for 12 rows and panels of 16, with AVX-512.
//
//go:noescape
func kern12x16(k int, x *float64, ldx int, y *float64, c *float64, ldc int, alpha float64)
