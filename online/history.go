package online

// RestartHistory starts a fresh lag history: the next Lags−1 bins are not
// used, so that no bin is regressed on frames from before a pause or a
// refused bin.
func (m *Mapper) RestartHistory() {
	m.added = 0
	m.gram.Restart()

}
