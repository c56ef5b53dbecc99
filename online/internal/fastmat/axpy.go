package fastmat

// AddScaled adds alpha·x to dst (equal lengths; a shorter x panics). On
// CPUs with AVX2 and FMA the blocks of 16 values run in assembly, the rest
// in Go. It is the sparse counterpart of MulAdd: one spike's lagged
// stimulus added to its unit's sums.
func AddScaled(dst []float64, alpha float64, x []float64) {
	x = x[:len(dst)]
	n := 0
	if hasAxpy16 {
		if n = len(dst) &^ 15; n > 0 {
			axpy16(n, alpha, &x[0], &dst[0])
		}
	}
	for i := n; i < len(dst); i++ {
		dst[i] += alpha * x[i]
	}
}

// AddScaled4 adds a[0]·x[0] + … + a[3]·x[3] to dst (each x at least as long
// as dst): four AddScaled calls that load and store dst once.
func AddScaled4(dst []float64, a *[4]float64, x *[4][]float64) {
	x0, x1, x2, x3 := x[0][:len(dst)], x[1][:len(dst)], x[2][:len(dst)], x[3][:len(dst)]
	n := 0
	if hasAxpy16 {
		if n = len(dst) &^ 15; n > 0 {
			axpy4x16(n, a, &x0[0], &x1[0], &x2[0], &x3[0], &dst[0])
		}
	}
	for i := n; i < len(dst); i++ {
		dst[i] += a[0]*x0[i] + a[1]*x1[i] + a[2]*x2[i] + a[3]*x3[i]
	}
}
