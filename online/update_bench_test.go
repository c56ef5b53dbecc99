package online

import "testing"

// BenchmarkUnitStatistics is the per-unit part of an Update alone, on one
// goroutine: every unit's statistics (weights, significance, split halves,
// predictive check, features on the unit's turn) at the reference workload
// (16×16 binary noise, 12 lags, D = 3072, 384 units at 10 spikes/s) after
// 20 updates. Update runs it on all cores; the block update (fold), the
// shared pass over P and the prior's tail are not in it.
func BenchmarkUnitStatistics(b *testing.B) {
	bw := newBenchWorkload(b, 16, 16, 12, 384, 10)
	for range 20 {
		bw.second()
		bw.m.Update()
	}
	m := bw.m
	s := m.newScratch()
	n := len(m.ids)
	b.ReportAllocs()
	b.ResetTimer()
	for range b.N {
		m.planRefits(n)
		for u := range n {
			m.unitDetail(u, &m.common, s)
		}
	}
}
