package fastmat

import (
	"fmt"
	"math/rand/v2"
	"testing"
)

// naiveAndCount is AndCount by its definition, the bits counted one by one
// (a population count is the number of set bits: common practice, no
// source) and plane m weighted by 2^m.
func naiveAndCount(dst []uint32, x, masks []uint64, nw int) {
	n := len(dst)
	for i := range dst {
		c := uint32(0)
		for k, m := range masks {
			for v := x[(k%nw)*n+i] & m; v != 0; v >>= 1 {
				c += uint32(v&1) << (k / nw)
			}
		}
		dst[i] += c
	}
}

// TestAndCount checks AndCount, and each assembly kernel this CPU can run,
// against the bit-by-bit count at lengths around the kernels' blocks, for
// strings of 1 to 5 words (4 is a batch of 256 bins) and 31 (the AVX2
// kernel's limit), with 1, 2 and 8 bit planes and a dst that is not zero.
func TestAndCount(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 8))
	type kernel struct {
		name string
		run  func(dst []uint32, x, masks []uint64, nw int)
		step int
	}
	kernels := []kernel{{"AndCount", AndCount, 1}}
	if hasAndCount8 {
		kernels = append(kernels, kernel{"avx512", func(dst []uint32, x, masks []uint64, nw int) {
			andCount8(len(dst), &dst[0], &x[0], len(dst), &masks[0], nw, len(masks)/nw)
		}, 8})
	}
	if hasAndCount8 {
		kernels = append(kernels, kernel{"avx512x16", func(dst []uint32, x, masks []uint64, nw int) {
			andCount16(len(dst), &dst[0], &x[0], len(dst), &masks[0], nw, len(masks)/nw)
		}, 16})
	}
	if hasAndCount4 {
		kernels = append(kernels, kernel{"avx2", func(dst []uint32, x, masks []uint64, nw int) {
			andCount4(len(dst), &dst[0], &x[0], len(dst), &masks[0], nw, len(masks)/nw)
		}, 8})
	}
	for _, k := range kernels {
		for _, nw := range []int{1, 2, 3, 4, 5, 31} {
			for _, n := range []int{0, 1, 3, 4, 7, 8, 9, 16, 27, 3072} {
				if n == 0 && k.step > 1 || n%k.step != 0 {
					continue
				}
				for _, planes := range []int{1, 2, 8} {
					x, masks := make([]uint64, nw*n+5), make([]uint64, planes*nw)
					for i := range x {
						x[i] = rng.Uint64() & rng.Uint64() // sparse and dense words
						if i%5 == 0 {
							x[i] = ^uint64(0)
						}
					}
					for i := range masks {
						masks[i] = rng.Uint64()
					}
					masks[0] = ^uint64(0)
					got, want := make([]uint32, n), make([]uint32, n)
					for i := range got {
						got[i] = uint32(i)
						want[i] = uint32(i)
					}
					k.run(got, x, masks, nw)
					naiveAndCount(want, x, masks, nw)
					for i := range got {
						if got[i] != want[i] {
							t.Fatalf("%s nw=%d n=%d planes=%d: dst[%d] = %d, want %d", k.name, nw, n, planes, i, got[i], want[i])
						}
					}
				}
			}
		}
	}
}

// BenchmarkAndCount counts one or two bit planes against 3072 strings (the
// reference workload's D = 16·16·12) of one word (a batch of 64 bins or
// fewer, as between updates every second) and of four (256 bins).
func BenchmarkAndCount(b *testing.B) {
	const n = 3072
	rng := rand.New(rand.NewPCG(9, 10))
	for _, nw := range []int{1, 4} {
		for _, planes := range []int{1, 2} {
			x, masks := make([]uint64, nw*n), make([]uint64, planes*nw)
			for i := range x {
				x[i] = rng.Uint64()
			}
			for i := range masks {
				masks[i] = rng.Uint64() & rng.Uint64() & rng.Uint64()
			}
			dst := make([]uint32, n)
			b.Run(fmt.Sprintf("words=%d/planes=%d", nw, planes), func(b *testing.B) {
				for b.Loop() {
					AndCount(dst, x, masks, nw)
				}
				b.ReportMetric(float64(b.N)*n*float64(nw*planes)/b.Elapsed().Seconds()/1e9, "Gwords/s")
			})
		}
	}
}
