package fastmat

import "fmt"

// AddLaggedRows adds rows of a table of 16-bit counts to the lags of dst:
// with n = len(dst)/lags values per lag,
//
//	dst[l·n + i] += Σ_k rows[starts[k] − l·n + i],   l < lags, i < n,
//
// so that a row start at starts[k] gives lag 0 its row, lag 1 the row n
// values earlier, and so on. It sums the pixel rows of a unit's spike bins
// at every lag: the rows are the frames of a batch, one after the other,
// and a spike with count c lists its bin's start c times. Sums wrap
// modulo 2¹⁶: the caller keeps them smaller. A start whose rows would fall
// outside rows, or len(dst) not a multiple of lags, panics. In assembly
// a lag's sums of a block of values stay in registers while the block of
// every start's row is added from memory: blocks of 256 values (eight AVX-512
// registers with AVX-512 BW, sixteen AVX2 ones otherwise), then of 64 and
// 16 (AVX2); the rest in Go.
func AddLaggedRows(dst, rows []uint16, starts []int32, lags int) {
	if lags <= 0 || len(dst)%lags != 0 {
		panic(fmt.Sprintf("fastmat: AddLaggedRows: %d sums in %d lags", len(dst), lags))
	}
	n := len(dst) / lags
	if n == 0 || len(starts) == 0 {
		return
	}
	for _, s := range starts {
		if int(s)-(lags-1)*n < 0 || int(s)+n > len(rows) {
			panic(fmt.Sprintf("fastmat: AddLaggedRows: start %d of rows of %d at %d lags outside %d values", s, n, lags, len(rows)))
		}
	}
	i := 0
	if hasLaggedRows256z {
		for ; n-i >= 256; i += 256 {
			laggedRows256z(&dst[i], &rows[0], &starts[0], len(starts), i, lags, n)
		}
	}
	if hasLaggedRows {
		for ; n-i >= 256; i += 256 {
			laggedRows256(&dst[i], &rows[0], &starts[0], len(starts), i, lags, n)
		}
		for ; n-i >= 64; i += 64 {
			laggedRows64(&dst[i], &rows[0], &starts[0], len(starts), i, lags, n)
		}
		for ; n-i >= 16; i += 16 {
			laggedRows16(&dst[i], &rows[0], &starts[0], len(starts), i, lags, n)
		}
	}
	if i == n {
		return
	}
	for l := range lags {
		out := dst[l*n : (l+1)*n]
		for _, s := range starts {
			row := rows[int(s)-l*n+i : int(s)-l*n+n]
			for j, v := range row {
				out[i+j] += v
			}
		}
	}
}

// LaggedRowsInAssembly reports whether AddLaggedRows runs in assembly on
// this CPU. In Go it is several times slower than the float multiply-adds
// it replaces (BenchmarkSTAFold), so callers then keep to those.
func LaggedRowsInAssembly() bool { return hasLaggedRows || hasLaggedRows256z }
