package online

// crossHalvesTo writes, in one pass over unit u's sums, what CrossTo(cross,
// u), staFromCross(sta, cross, Spikes(u)) and HalvesTo(a, b, u) write, the
// same values bit for bit: the white-noise statistics of a unit read the
// unit's sums once. Without the means cached by CacheMeans, or for a unit
// without spikes in a half, it makes the separate calls.
func (s *STA) crossHalvesTo(cross, sta, a, b []float64, u int) {
	s.checkDst("crossHalvesTo", cross)
	s.checkDst("crossHalvesTo", sta)
	s.checkDst("crossHalvesTo", a)
	s.checkDst("crossHalvesTo", b)
	s.Flush()
	ny := s.Spikes(u)
	ya, yb := s.HalfSpikes(u)
	if s.meanN != s.n || s.mean[2] == nil || ny == 0 || ya == 0 || yb == 0 {
		s.CrossTo(cross, u)
		staFromCross(sta, cross, ny)
		s.HalvesTo(a, b, u)
		return
	}
	n := len(cross)
	meanA, meanB, mean := s.mean[0][:n], s.mean[1][:n], s.mean[2][:n]
	sumA, sumB := s.block(u, staA)[:n], s.block(u, staB)[:n]
	sta, a, b = sta[:n], a[:n], b[:n]
	inv, invA, invB := 1/ny, 1/ya, 1/yb
	for i := range cross {
		c := sumA[i] + sumB[i] - ny*mean[i]
		cross[i] = c
		sta[i] = c * inv
		a[i] = sumA[i]*invA - meanA[i]
		b[i] = sumB[i]*invB - meanB[i]
	}
}
