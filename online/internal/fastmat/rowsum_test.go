package fastmat

import (
	"fmt"
	"math/rand/v2"
	"slices"
	"testing"
)

// TestAddLaggedRows checks AddLaggedRows against its definition, a sum
// value by value, for row lengths around the assembly's blocks of 256, 64
// and 16 values, one and 12 lags, starts repeated (a count above one) and
// sums that wrap modulo 2¹⁶ (16-bit lanes add modulo 2¹⁶: common practice,
// no source). It checks the kernels this CPU runs: with
// GODEBUG=cpu.avx512f=off the AVX2 ones, with cpu.avx2=off too the Go path.
func TestAddLaggedRows(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	for _, n := range []int{1, 15, 16, 17, 64, 80, 255, 256, 273, 336} {
		for _, lags := range []int{1, 12} {
			for _, nk := range []int{1, 3, 40} {
				t.Run(fmt.Sprintf("n %d lags %d starts %d", n, lags, nk), func(t *testing.T) {
					rows := make([]uint16, (lags+30)*n)
					for i := range rows {
						rows[i] = uint16(rng.Uint32())
					}
					starts := make([]int32, nk)
					for k := range starts {
						starts[k] = int32((lags - 1 + rng.IntN(31)) * n)
					}
					starts[nk-1] = starts[0] // a count of two
					dst := make([]uint16, lags*n)
					for i := range dst {
						dst[i] = uint16(rng.Uint32())
					}
					want := slices.Clone(dst)
					for l := range lags {
						for i := range n {
							for _, s := range starts {
								want[l*n+i] += rows[int(s)-l*n+i]
							}
						}
					}
					AddLaggedRows(dst, rows, starts, lags)
					if i := slices.Compare(dst, want); i != 0 {
						for j := range dst {
							if dst[j] != want[j] {
								t.Fatalf("sum %d = %d, want %d", j, dst[j], want[j])
							}
						}
					}
				})
			}
		}
	}
}

// TestAddLaggedRowsOutside: a start whose earliest lag falls before the
// rows, or whose row runs past their end, panics instead of reading
// outside the table.
func TestAddLaggedRowsOutside(t *testing.T) {
	rows := make([]uint16, 10*16)
	for _, tc := range []struct {
		name  string
		start int32
	}{{"before the rows", 2 * 16}, {"past the end", 9*16 + 1}} {
		t.Run(tc.name, func(t *testing.T) {
			defer func() {
				if recover() == nil {
					t.Fatal("no panic")
				}
			}()
			AddLaggedRows(make([]uint16, 4*16), rows, []int32{tc.start}, 4)
		})
	}
}

// BenchmarkAddLaggedRows is one unit's half of a batch at the reference
// workload: 16×16 pixels, 12 lags, 21 spikes among 256 bins.
func BenchmarkAddLaggedRows(b *testing.B) {
	const n, lags, bins, spikes = 256, 12, 256, 21
	rows := make([]uint16, (lags-1+bins)*n)
	starts := make([]int32, spikes)
	for k := range starts {
		starts[k] = int32((lags - 1 + 12*k) * n)
	}
	dst := make([]uint16, lags*n)
	for b.Loop() {
		AddLaggedRows(dst, rows, starts, lags)
	}
}
