package online

import (
	"math"
	"slices"
	"testing"
)

// TestSplitHalfNullThroughMapper: for null units the split-half r of the
// mapper's own halves centres on zero, on white noise (the STA halves) and
// on a correlated movie (the ridge fits of each half's counts, corrected for
// the half indicator's own fit): the mean over 240 units lies within four
// standard errors of zero (central limit theorem; common practice, no
// source). Without the half-indicator correction (halvesTo's ȳ·w_h terms)
// the movie's mean r fell to −0.088 (4 standard errors: 0.033) and the
// test failed.
func TestSplitHalfNullThroughMapper(t *testing.T) {
	const w, h, lags, units = 6, 6, 4, 240
	cases := []struct {
		name string
		cfg  Config
	}{
		{"white", Config{Width: w, Height: h, Lags: lags, White: true, PixelVariance: 1}},
		{"movie", Config{Width: w, Height: h, Lags: lags, Lambda: 20}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			cells := make([]lnpCell, units)
			zero := make([]float64, w*h*lags)
			for i := range cells {
				cells[i] = lnpCell{filter: zero, base: 0.1 + 0.3*float64(i%4)/3}
			}
			fr := binaryFrame
			if !c.cfg.White {
				fr = smoothFrames(w, h)
			}
			sim := newSimulation(t, c.cfg, cells, 41, fr)
			sim.run(60 * 60)
			snap := sim.m.Update()
			var rs []float64
			for _, u := range snap.Units {
				if R := float64(u.Reliability); !math.IsNaN(R) {
					rs = append(rs, R/(2-R))
				}
			}
			if len(rs) < units/2 {
				t.Fatalf("only %d of %d units have a reliability", len(rs), units)
			}
			var m, v float64
			for _, r := range rs {
				m += r
			}
			m /= float64(len(rs))
			for _, r := range rs {
				v += (r - m) * (r - m)
			}
			se := math.Sqrt(v/float64(len(rs)-1)) / math.Sqrt(float64(len(rs)))
			if math.Abs(m) > 4*se {
				t.Errorf("mean null split-half r = %.4f, want 0 ± %.4f (4 standard errors)", m, 4*se)
			}
			t.Logf("mean null r %.4f ± %.4f (se) over %d units", m, se, len(rs))
		})
	}
}

// TestReliabilityWindowIgnoresOwnPeakBeforeSignificance: before a unit is
// significant its split-half window sits on the population's peak lag, not
// on its own (whose noise would pick the lags where its halves happen to
// agree, biasing r upward under the null); once significant, on its own.
func TestReliabilityWindowIgnoresOwnPeakBeforeSignificance(t *testing.T) {
	m, err := NewMapper(Config{Width: 4, Height: 4, Lags: 8, White: true, PixelVariance: 1})
	if err != nil {
		t.Fatal(err)
	}
	m.popPeak = 2
	w := make([]float64, 16*8)
	for i := 6 * 16; i < 7*16; i++ {
		w[i] = 5 // all the energy at lag 6
	}
	energy := make([]float64, 8)
	for l := range energy {
		energy[l] = dot(w[l*16:(l+1)*16], w[l*16:(l+1)*16])
	}
	lo, hi := m.reliabilityWindow(energy, false)
	if lo != 1*16 || hi != 4*16 {
		t.Errorf("not significant: window [%d, %d), want lags 1…3 around the population's peak lag 2", lo, hi)
	}
	lo, hi = m.reliabilityWindow(energy, true)
	if lo != 5*16 || hi != 8*16 {
		t.Errorf("significant: window [%d, %d), want lags 5…7 around its own peak lag 6", lo, hi)
	}
}

// TestUpdateReliabilityOnePass: Update forms the split halves, their sums
// and the weights' lag energies in fused passes; the snapshot's
// Reliability and Ridge must equal, bit for bit, the definitions written
// out from the public reads (halvesTo's comment: a = w_A − ȳ_A·w_h,
// b = w − w_A + ȳ_B·w_h, then SplitHalf), on white noise and on a movie.
func TestUpdateReliabilityOnePass(t *testing.T) {
	const w, h, lags = 6, 6, 4
	for _, white := range []bool{true, false} {
		cfg := Config{Width: w, Height: h, Lags: lags, White: white, PixelVariance: 1}
		cells := []lnpCell{{filter: gaborFilter(w, h, lags, 2, 3, 1.2, 0.4, 1), base: 0.2, gain: 0.8}}
		for k := range 7 {
			cells = append(cells, lnpCell{filter: make([]float64, w*h*lags), base: 0.05 + 0.05*float64(k)})
		}
		sim := newSimulation(t, cfg, cells, 23, binaryFrame)
		sim.run(30 * 60) // ends with an Update: the state is the snapshot's
		m, snap := sim.m, sim.m.Snapshot()
		D := m.dim
		wy, wa, wh, a, b := make([]float64, D), make([]float64, D), make([]float64, D), make([]float64, D), make([]float64, D)
		m.ridge.WeightsTo(wh, 0)
		for u, id := range m.ids {
			d, _ := snap.Detail(id)
			m.ridge.WeightsTo(wy, m.colY(u))
			m.ridge.WeightsTo(wa, m.colA(u))
			meanA := m.spikesA[u] / float64(m.usedA)
			meanB := (m.spikes[u] - m.spikesA[u]) / float64(m.used-m.usedA)
			for i := range a {
				a[i] = wa[i] - meanA*wh[i]
				b[i] = wy[i] - wa[i] + meanB*wh[i]
			}
			_, R := SplitHalf(a, b)
			if math.IsNaN(R) || math.Float64bits(float64(d.Reliability)) != math.Float64bits(R) {
				t.Errorf("white %v, unit %s: Reliability %v, written out %v", white, id, d.Reliability, R)
			}
			for i, v := range d.Ridge {
				if math.Float64bits(float64(v)) != math.Float64bits(wy[i]) {
					t.Fatalf("white %v, unit %s: ridge[%d] %v, WeightsTo %v", white, id, i, v, wy[i])
				}
			}
			// The features take the lag energies from the same pass.
			f, err := FeaturesOf(wy, w, h, lags, m.cfg.FramePeriod, nil)
			if err != nil || f.PeakLag != d.PeakLag || !slices.Equal(f.Map, d.Map) {
				t.Errorf("unit %s: peak lag %d, map %v; FeaturesOf: %d, %v (%v)", id, d.PeakLag, d.Map, f.PeakLag, f.Map, err)
			}
			energy, wz := make([]float64, lags), make([]float64, D)
			b0, total := m.weightsEnergiesTo(wz, energy, m.colY(u))
			if b := m.ridge.WeightsTo(wy, m.colY(u)); b0 != b || !slices.Equal(wz, wy) {
				t.Errorf("unit %s: weightsEnergiesTo differs from WeightsTo", id)
			}
			if total != dot(wy, wy) {
				t.Errorf("unit %s: lag energies total %v, |w|² %v", id, total, dot(wy, wy))
			}
			for l := range lags {
				lag := wy[l*w*h : (l+1)*w*h]
				if energy[l] != dot(lag, lag) {
					t.Errorf("unit %s: lag %d energy %v, |w_l|² %v", id, l, energy[l], dot(lag, lag))
				}
			}
		}
	}
}
