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
