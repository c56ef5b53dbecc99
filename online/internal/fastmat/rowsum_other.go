//go:build !amd64

package fastmat

// hasLaggedRows is false: AddLaggedRows runs in Go.
const hasLaggedRows, hasLaggedRows256z = false, false

func laggedRows256(dst, rows *uint16, starts *int32, nk, shift, lags, n int) {
	panic("fastmat: laggedRows256 without assembly")
}

func laggedRows64(dst, rows *uint16, starts *int32, nk, shift, lags, n int) {
	panic("fastmat: laggedRows64 without assembly")
}

func laggedRows16(dst, rows *uint16, starts *int32, nk, shift, lags, n int) {
	panic("fastmat: laggedRows16 without assembly")
}

func laggedRows256z(dst, rows *uint16, starts *int32, nk, shift, lags, n int) {
	panic("fastmat: laggedRows256z without assembly")
}
