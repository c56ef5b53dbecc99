//go:build !amd64

package fastmat

// kernels is empty: the pure-Go path does all the work.
var kernels []microKernel

// hasAxpy16 is false: AddScaled runs in Go.
const hasAxpy16 = false

func axpy16(n int, alpha float64, x *float64, y *float64) { panic("fastmat: axpy16 without assembly") }

func axpy4x16(n int, a *[4]float64, x0, x1, x2, x3 *float64, y *float64) {
	panic("fastmat: axpy4x16 without assembly")
}

// hasAndCount8 and hasAndCount4 are false: AndCount runs in Go.
const hasAndCount8, hasAndCount4 = false, false

func andCount8(n int, dst *uint32, x *uint64, stride int, masks *uint64, nw, planes int) {
	panic("fastmat: andCount8 without assembly")
}

func andCount4(n int, dst *uint32, x *uint64, stride int, masks *uint64, nw, planes int) {
	panic("fastmat: andCount4 without assembly")
}

func andCount16(n int, dst *uint32, x *uint64, stride int, masks *uint64, nw, planes int) {
	panic("fastmat: andCount16 without assembly")
}
