package online

import (
	"math"
	"testing"
)

// Two mappers fed the same bins must agree bit for bit, whatever the
// scheduling of the parallel parts: replays depend on it.
func TestMapperDeterministic(t *testing.T) {
	run := func() *Snapshot {
		const w, h, lags = 8, 8, 6
		cfg := Config{Width: w, Height: h, Lags: lags, White: true, PixelVariance: 1}
		cells := []lnpCell{
			{filter: gaborFilter(w, h, lags, 3, 4, 1.5, 0.4, 2), base: 0.15, gain: 0.8},
			{filter: gaborFilter(w, h, lags, 5, 2, 1.2, 1.4, 3), base: 0.1, gain: 0.8},
		}
		sim := newSimulation(t, cfg, cells, 9, binaryFrame)
		sim.run(30 * 60)
		return sim.m.Snapshot()
	}
	a, b := run(), run()
	for _, u := range a.Units {
		da, _ := a.Detail(u.ID)
		db, _ := b.Detail(u.ID)
		for i := range da.Ridge {
			if math.Float64bits(float64(da.Ridge[i])) != math.Float64bits(float64(db.Ridge[i])) {
				t.Fatalf("unit %s ridge[%d]: %v then %v", u.ID, i, da.Ridge[i], db.Ridge[i])
			}
		}
		if math.Float64bits(float64(da.Reliability)) != math.Float64bits(float64(db.Reliability)) {
			t.Fatalf("unit %s reliability: %v then %v", u.ID, da.Reliability, db.Reliability)
		}
	}
}
