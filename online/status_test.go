package online

import (
	"math"
	"testing"
)

func TestClassify(t *testing.T) {
	for _, tc := range []struct {
		spikes, min          int64
		significant, reached bool
		want                 Status
	}{
		{10, 300, false, false, Collecting},
		{299, 300, false, true, Collecting}, // reliability alone is not a field
		{300, 300, false, false, NoField},
		{5000, 300, false, true, NoField},
		{40, 300, true, false, Emerging}, // significant early: never "collecting"
		{4000, 300, true, false, Emerging},
		{4000, 300, true, true, Reliable},
		{40, 300, true, true, Reliable},
	} {
		if got := Classify(tc.spikes, tc.min, tc.significant, tc.reached); got != tc.want {
			t.Errorf("Classify(%d, %d, %v, %v) = %q, want %q", tc.spikes, tc.min, tc.significant, tc.reached, got, tc.want)
		}
	}
}

// statusUnits is the hand-worked population of TestSummarize:
//
//	reliable (10, 20) σ 2, 1   → box half-side 2·2 = 4
//	reliable (14, 20) σ 1, 1   → 2
//	reliable (12, 26) σ 3, 2   → 6
//	emerging, ETA 30 s; emerging, too early; no field; collecting.
//
// Centre mean (12, 22); spread x sqrt(8/3), y sqrt(24/3) = sqrt(8).
// Median centre (12, 20). Square sides centred there:
// 2·max(2, 0) + 8 = 12; 2·max(2, 0) + 4 = 8; 2·max(0, 6) + 12 = 24.
func statusUnits() []UnitSummary {
	nan := Float(math.NaN())
	return []UnitSummary{
		{ID: "a", Status: Reliable, CentreX: 10, CentreY: 20, SigmaX: 2, SigmaY: 1, ETA: 0},
		{ID: "b", Status: Reliable, CentreX: 14, CentreY: 20, SigmaX: 1, SigmaY: 1, ETA: 0},
		{ID: "c", Status: Reliable, CentreX: 12, CentreY: 26, SigmaX: 3, SigmaY: 2, ETA: 0},
		{ID: "d", Status: Emerging, CentreX: 40, CentreY: 40, SigmaX: 1, SigmaY: 1, ETA: 30},
		{ID: "e", Status: Emerging, CentreX: nan, CentreY: nan, ETA: nan},
		{ID: "f", Status: NoField, ETA: nan},
		{ID: "g", Status: Collecting, ETA: nan},
	}
}

func TestSummarize(t *testing.T) {
	nan := math.NaN()
	geom := &Geometry{DistanceCM: 50, PixelSizeCM: 0.25}
	for _, tc := range []struct {
		name             string
		units            []UnitSummary
		fraction, apfrac float64
		geom             *Geometry
		// expectations
		sig, rel      int
		eta           float64
		ready         bool
		aperture, deg float64
	}{
		// S = 5, k = ceil(0.8·5) = 4 > 3 reliable; sorted ETAs 0, 0, 0, 30, too early.
		{"fourth ETA", statusUnits(), 0.8, 0.9, geom, 5, 3, 30, false, 24,
			6.867260724901045}, // 2·atan(24·0.25/(2·50)) = 2·atan(0.06) in degrees
		// k = ceil(0.5·5) = 3 ≤ 3 reliable: ready now.
		{"ready", statusUnits(), 0.5, 0.6, nil, 5, 3, 0, true, 12, nan}, // ceil(0.6·3) = 2nd side
		// k = 5: the fifth unit is too early.
		{"needs a too-early unit", statusUnits(), 1, 0.9, nil, 5, 3, nan, false, 24, nan},
		{"no units", nil, 0.8, 0.9, geom, 0, 0, nan, false, nan, nan},
		{"only emerging", statusUnits()[3:4], 0.8, 0.9, nil, 1, 0, 30, false, nan, nan},
	} {
		t.Run(tc.name, func(t *testing.T) {
			got := Summarize(tc.units, 0.9, tc.fraction, tc.apfrac, tc.geom)
			if got.Units != len(tc.units) || got.Significant != tc.sig || got.Reliable != tc.rel || got.Ready != tc.ready {
				t.Fatalf("counts %d/%d/%d ready %v; want %d/%d/%d %v", got.Units, got.Significant, got.Reliable, got.Ready,
					len(tc.units), tc.sig, tc.rel, tc.ready)
			}
			for _, c := range []struct {
				what      string
				got, want float64
			}{
				{"ETA", float64(got.ETA), tc.eta},
				{"Aperture", float64(got.Aperture), tc.aperture},
				{"ApertureDeg", float64(got.ApertureDeg), tc.deg},
				{"Target", float64(got.Target), 0.9},
				{"ApertureFraction", float64(got.ApertureFraction), tc.apfrac},
			} {
				if !relSameFloat(c.got, c.want, 1e-12) {
					t.Errorf("%s = %g, want %g", c.what, c.got, c.want)
				}
			}
			if tc.rel == 0 {
				if !math.IsNaN(float64(got.CentreX)) || !math.IsNaN(float64(got.SuggestX)) {
					t.Errorf("no reliable units, yet centre %g, suggestion %g", got.CentreX, got.SuggestX)
				}
				return
			}
			for _, c := range []struct {
				what      string
				got, want float64
			}{
				{"CentreX", float64(got.CentreX), 12},
				{"CentreY", float64(got.CentreY), 22},
				{"SpreadX", float64(got.SpreadX), math.Sqrt(8.0 / 3)},
				{"SpreadY", float64(got.SpreadY), math.Sqrt(8)},
				{"SuggestX", float64(got.SuggestX), 12},
				{"SuggestY", float64(got.SuggestY), 20},
			} {
				if !relSameFloat(c.got, c.want, 1e-12) {
					t.Errorf("%s = %g, want %g", c.what, c.got, c.want)
				}
			}
		})
	}
}

// TestSummarizeEvenMedian: two reliable units, median of an even count is
// the mean of the middle two; one point-like field (NaN sigma counts 0).
// Centres (0, 0) σ 1 and (4, 2) σ NaN: suggestion (2, 1); sides
// 2·max(2, 1) + 4 = 8 and 2·max(2, 1) + 0 = 4; with aperture fraction 1
// the second: 8.
func TestSummarizeEvenMedian(t *testing.T) {
	nan := Float(math.NaN())
	units := []UnitSummary{
		{Status: Reliable, CentreX: 0, CentreY: 0, SigmaX: 1, SigmaY: 1},
		{Status: Reliable, CentreX: 4, CentreY: 2, SigmaX: nan, SigmaY: nan},
	}
	got := Summarize(units, 0.9, 0.8, 1, nil)
	if got.SuggestX != 2 || got.SuggestY != 1 || got.Aperture != 8 || !got.Ready || got.ETA != 0 {
		t.Fatalf("got %+v", got)
	}
	if got.SpreadX != 2 || got.SpreadY != 1 {
		t.Fatalf("spread %g, %g; want 2, 1", got.SpreadX, got.SpreadY)
	}
}
