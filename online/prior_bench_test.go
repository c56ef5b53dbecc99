package online

import (
	"math/rand/v2"
	"testing"
)

// BenchmarkPriorEvaluate is one evidence evaluation (posterior mean and
// profile log evidence) in the default 7×7 pixel × 6 lag window (d = 294).
func BenchmarkPriorEvaluate(b *testing.B) {
	w := PriorWindow{X0: 4, Y0: 4, T0: 1, NX: 7, NY: 7, NT: 6}
	p := newPriorProblem(w)
	r := rand.New(rand.NewPCG(1, 2))
	k := p.k
	// A Gram matrix of white binary noise over 3600 bins.
	for i := range k {
		p.gram[i*k+i] = 3600
		for j := range i {
			v := 60 * r.NormFloat64()
			p.gram[i*k+j], p.gram[j*k+i] = v, v
		}
		p.c[i] = 10 * r.NormFloat64()
	}
	p.q, p.n = 500, 3600
	h := SmoothLocal{Scale: 1e-3, Noise: 1, Length: [3]float64{1.5, 1.5, 1}, Centre: [3]float64{7, 7, 3}, Width: [3]float64{2, 2, 1.5}}
	b.ReportAllocs()
	for b.Loop() {
		if _, err := p.evaluate(h, true); err != nil {
			b.Fatal(err)
		}
	}
}
