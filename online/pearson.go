package online

import "math"

// Pearson is the sample correlation coefficient of a and b (NaN when the
// lengths differ, are below 2, or either is constant or not finite).
func Pearson(a, b Floats) float64 {
	if len(a) != len(b) || len(a) < 2 {
		return math.NaN()
	}
	var ma, mb float64
	for i := range a {
		ma += float64(a[i])
		mb += float64(b[i])
	}
	n := float64(len(a))
	ma, mb = ma/n, mb/n
	var sab, saa, sbb float64
	for i := range a {
		x, y := float64(a[i])-ma, float64(b[i])-mb
		sab += x * y
		saa += x * x
		sbb += y * y
	}
	if !(saa > 0 && sbb > 0) || math.IsInf(saa, 0) || math.IsInf(sbb, 0) {
		return math.NaN()
	}
	return math.Max(-1, math.Min(1, sab/math.Sqrt(saa*sbb)))
}
