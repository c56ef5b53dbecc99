package fastmat

// Transpose writes the rows×cols block x (stride ldx) as cols×rows into y
// (stride ldy), in tiles of 32×32 values that stay in the cache.
func Transpose(rows, cols int, x []float64, ldx int, y []float64, ldy int) {
	const b = 32
	for i0 := 0; i0 < rows; i0 += b {
		for j0 := 0; j0 < cols; j0 += b {
			for i := i0; i < min(i0+b, rows); i++ {
				for j := j0; j < min(j0+b, cols); j++ {
					y[j*ldy+i] = x[i*ldx+j]
				}
			}
		}
	}
}
