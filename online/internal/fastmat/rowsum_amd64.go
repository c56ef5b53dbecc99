package fastmat

import "golang.org/x/sys/cpu"

// hasLaggedRows tells whether the laggedRows kernels can run (AVX2).
var hasLaggedRows = cpu.X86.HasAVX2

// laggedRows256 adds, for every lag l < lags, to dst[l·n : l·n+256] the
// 256 values at rows + shift − l·n + starts[k] for every k < nk (nk and
// lags positive), with AVX2: a lag's sums stay in sixteen registers while
// the rows are added from memory. laggedRows64 and laggedRows16 are the
// same for 64 and 16 values.
//
//go:noescape
func laggedRows256(dst, rows *uint16, starts *int32, nk, shift, lags, n int)

//go:noescape
func laggedRows64(dst, rows *uint16, starts *int32, nk, shift, lags, n int)

//go:noescape
func laggedRows16(dst, rows *uint16, starts *int32, nk, shift, lags, n int)

// hasLaggedRows256z tells whether laggedRows256z can run (AVX-512 BW).
var hasLaggedRows256z = cpu.X86.HasAVX512F && cpu.X86.HasAVX512BW

// laggedRows256z is laggedRows256 in eight AVX-512 registers (AVX-512 BW).
//
//go:noescape
func laggedRows256z(dst, rows *uint16, starts *int32, nk, shift, lags, n int)
