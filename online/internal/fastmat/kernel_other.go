//go:build !amd64

package fastmat

// kernels is empty: the pure-Go path does all the work.
var kernels []microKernel
