package fastmat

import "golang.org/x/sys/cpu"

// hasSqSum16 tells whether sqSum16 can run (AVX2 and FMA).
var hasSqSum16 = cpu.X86.HasAVX2 && cpu.X86.HasFMA

// sqSum16 is ShiftedSquares over n values, n a positive multiple of 16,
// with AVX2 and FMA.
//
//go:noescape
func sqSum16(n int, c float64, p, e, sq *float64) float64
