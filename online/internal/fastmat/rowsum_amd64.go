package fastmat

import "golang.org/x/sys/cpu"

// hasLaggedRows tells whether the laggedRows kernels can run (AVX2).
var hasLaggedRows = cpu.X86.HasAVX2

// laggedRows256 adds to dst[0:256] the 256 values at rows+shift+starts[k]
// for every k < nk (nk positive), with AVX2: the sums stay in sixteen
// registers while the rows are added from memory. laggedRows64 and
// laggedRows16 are the same for 64 and 16 values.
//
//go:noescape
func laggedRows256(dst, rows *uint16, starts *int32, nk, shift int)

//go:noescape
func laggedRows64(dst, rows *uint16, starts *int32, nk, shift int)

//go:noescape
func laggedRows16(dst, rows *uint16, starts *int32, nk, shift int)
