package online

import (
	"math"
	"testing"
)

// TestPearson checks the correlation against numpy.corrcoef
// ([1,2,3,4] with [1,2,4,3] gives 0.8 exactly: numerator 4, both sums of
// squares 5) and its undefined cases.
func TestPearson(t *testing.T) {
	cases := []struct {
		name string
		a, b []float64
		want float64
	}{
		{"worked example", []float64{1, 2, 3, 4}, []float64{1, 2, 4, 3}, 0.8},
		{"reversed", []float64{1, 2, 3}, []float64{3, 2, 1}, -1},
		{"constant", []float64{1, 1, 1}, []float64{1, 2, 3}, math.NaN()},
		{"lengths differ", []float64{1, 2}, []float64{1, 2, 3}, math.NaN()},
		{"too short", []float64{1}, []float64{1}, math.NaN()},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			got := Pearson(FloatsOf(c.a), FloatsOf(c.b))
			if math.IsNaN(c.want) != math.IsNaN(got) || (!math.IsNaN(c.want) && math.Abs(got-c.want) > 1e-15) {
				t.Errorf("Pearson = %v, want %v", got, c.want)
			}
		})
	}
}
