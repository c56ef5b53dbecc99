package online

import (
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"strconv"
	"testing"
)

func TestFeaturesSVDGolden(t *testing.T) {
	// Reference: numpy.linalg.svd, from testdata/golden/features_golden.py.
	raw, err := os.ReadFile("../testdata/golden/features_golden.json")
	if err != nil {
		t.Fatal(err)
	}
	var golden struct {
		Cases []struct {
			Name           string    `json:"name"`
			Width          int       `json:"width"`
			Height         int       `json:"height"`
			Lags           int       `json:"lags"`
			Est            []float64 `json:"est"`
			SingularValues []float64 `json:"singular_values"`
			Separability   float64   `json:"separability"`
			Rank1          []float64 `json:"rank1"`
			PeakLag        int       `json:"peak_lag"`
			Polarity       int       `json:"polarity"`
			Spatial        []float64 `json:"spatial"`
			Temporal       []float64 `json:"temporal"`
		} `json:"cases"`
	}
	if err := json.Unmarshal(raw, &golden); err != nil {
		t.Fatal(err)
	}
	const tol = 1e-10
	for _, c := range golden.Cases {
		t.Run(c.Name, func(t *testing.T) {
			f, err := NewFeatureFinder(c.Width, c.Height, c.Lags, 1.0/60, nil)
			if err != nil {
				t.Fatal(err)
			}
			var got Features
			if err := f.FeaturesTo(&got, c.Est); err != nil {
				t.Fatal(err)
			}
			// Only σ₁ is computed (through MᵀM; the smaller singular
			// values would carry round-off of order √ε·σ₁).
			if want := c.SingularValues[0]; math.Abs(f.sv1-want) > tol {
				t.Errorf("σ1 = %.14g, numpy %.14g", f.sv1, want)
			}
			if math.Abs(float64(got.Separability)-c.Separability) > tol {
				t.Errorf("separability %.14g, numpy %.14g", got.Separability, c.Separability)
			}
			if got.PeakLag != c.PeakLag || got.Polarity != c.Polarity {
				t.Errorf("peak lag %d polarity %d, want %d %d", got.PeakLag, got.Polarity, c.PeakLag, c.Polarity)
			}
			p := c.Width * c.Height
			for i := range p {
				for l := range c.Lags {
					v := float64(got.Spatial[i] * got.Temporal[l])
					if math.Abs(v-c.Rank1[i*c.Lags+l]) > tol {
						t.Fatalf("rank-1 [%d,%d] = %.14g, numpy %.14g", i, l, v, c.Rank1[i*c.Lags+l])
					}
				}
				if math.Abs(float64(got.Spatial[i])-c.Spatial[i]) > tol {
					t.Errorf("spatial[%d] = %.14g, numpy %.14g", i, got.Spatial[i], c.Spatial[i])
				}
			}
			for l, want := range c.Temporal {
				if math.Abs(float64(got.Temporal[l])-want) > tol {
					t.Errorf("temporal[%d] = %.14g, numpy %.14g", l, got.Temporal[l], want)
				}
			}
		})
	}
}

// gaussField is a lag-major field: an elliptical Gaussian map of amplitude
// amp times a temporal profile, plus white noise of sd noise.
func gaussField(r *rand.Rand, w, h int, temporal []float64, amp, x0, y0, s1, s2, angle, noise float64) []float64 {
	p := w * h
	est := make([]float64, p*len(temporal))
	c, s := math.Cos(angle), math.Sin(angle)
	for l, tv := range temporal {
		for i := range p {
			dx, dy := float64(i%w)-x0, float64(i/w)-y0
			u, v := dx*c+dy*s, -dx*s+dy*c
			est[l*p+i] = tv*amp*math.Exp(-0.5*(u*u/(s1*s1)+v*v/(s2*s2))) + noise*r.NormFloat64()
		}
	}
	return est
}

func TestFeaturesGaussianFit(t *testing.T) {
	// A synthetic elliptical Gaussian plus noise (peak signal-to-noise 20):
	// the fit recovers centre within 0.15 pixel, σ within 10% and the angle
	// within 0.1 rad (tolerances chosen for this noise level).
	temporal := []float64{0, 0.3, 1, -0.4}
	cases := []struct {
		name                       string
		amp, x0, y0, s1, s2, angle float64
	}{
		{"bright tilted", 1, 9.3, 6.7, 3.0, 1.5, 0.5},
		{"dark steep", -2, 5.6, 8.2, 2.5, 1.2, -1.2},
		{"bright, less elongated", 0.5, 11.0, 4.5, 2.0, 1.3, 0.2},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			r := rand.New(rand.NewPCG(5, 6))
			est := gaussField(r, 20, 16, temporal, c.amp, c.x0, c.y0, c.s1, c.s2, c.angle, math.Abs(c.amp)/20)
			got, err := FeaturesOf(est, 20, 16, len(temporal), 0.02, nil)
			if err != nil {
				t.Fatal(err)
			}
			if got.PeakLag != 2 || got.LatencyMS != 40 {
				t.Errorf("peak lag %d latency %v ms, want 2 and 40", got.PeakLag, got.LatencyMS)
			}
			if want := int(math.Copysign(1, c.amp)); got.Polarity != want {
				t.Errorf("polarity %d, want %d", got.Polarity, want)
			}
			if math.Abs(float64(got.CentreX)-c.x0) > 0.15 || math.Abs(float64(got.CentreY)-c.y0) > 0.15 {
				t.Errorf("centre (%.3f, %.3f), want (%.2f, %.2f)", got.CentreX, got.CentreY, c.x0, c.y0)
			}
			if math.Abs(float64(got.SigmaX)/c.s1-1) > 0.1 || math.Abs(float64(got.SigmaY)/c.s2-1) > 0.1 {
				t.Errorf("σ (%.3f, %.3f), want (%.2f, %.2f)", got.SigmaX, got.SigmaY, c.s1, c.s2)
			}
			if d := math.Abs(normAngle(float64(got.Angle) - c.angle)); d > 0.1 {
				t.Errorf("angle %.3f, want %.2f", got.Angle, c.angle)
			}
		})
	}
}

// TestFeaturesWarmWindowedFit starts the fit from a nearby earlier fit, as
// the mapper does between refits: it then fits a window around the field
// (checked to be smaller than the frame) in at most gaussWarmIter steps, and
// must recover the same field as TestFeaturesGaussianFit's tolerances ask
// and agree with the cold fit on the whole frame to 0.05 pixel and 2 % in σ
// (the thresholded moments, the fallback, are further off).
func TestFeaturesWarmWindowedFit(t *testing.T) {
	temporal := []float64{0, 1, 0.3}
	const w, h, x0, y0, s1, s2, angle = 40, 36, 21.3, 14.6, 2.6, 1.4, 0.7
	est := gaussField(rand.New(rand.NewPCG(5, 7)), w, h, temporal, 1, x0, y0, s1, s2, angle, 1.0/20)
	f, err := NewFeatureFinder(w, h, len(temporal), 0.02, nil)
	if err != nil {
		t.Fatal(err)
	}
	var cold, warm Features
	if err := f.FeaturesTo(&cold, est); err != nil {
		t.Fatal(err)
	}
	f.Warm = &Features{CentreX: x0 + 0.6, CentreY: y0 - 0.4, SigmaX: 1.2 * s1, SigmaY: 0.9 * s2, Angle: angle + 0.2}
	if err := f.FeaturesTo(&warm, est); err != nil {
		t.Fatal(err)
	}
	if len(f.win) >= w*h || len(f.win) == 0 {
		t.Fatalf("window of %d pixels in a frame of %d", len(f.win), w*h)
	}
	if math.Abs(float64(warm.CentreX)-x0) > 0.15 || math.Abs(float64(warm.CentreY)-y0) > 0.15 ||
		math.Abs(float64(warm.SigmaX)/s1-1) > 0.1 || math.Abs(float64(warm.SigmaY)/s2-1) > 0.1 ||
		math.Abs(normAngle(float64(warm.Angle)-angle)) > 0.1 {
		t.Errorf("warm fit centre (%.3f, %.3f) σ (%.3f, %.3f) angle %.3f; want (%.1f, %.1f) (%.1f, %.1f) %.1f",
			warm.CentreX, warm.CentreY, warm.SigmaX, warm.SigmaY, warm.Angle, x0, y0, s1, s2, angle)
	}
	if math.Abs(float64(warm.CentreX-cold.CentreX)) > 0.05 || math.Abs(float64(warm.CentreY-cold.CentreY)) > 0.05 ||
		math.Abs(float64(warm.SigmaX/cold.SigmaX)-1) > 0.02 || math.Abs(float64(warm.SigmaY/cold.SigmaY)-1) > 0.02 {
		t.Errorf("warm centre (%.3f, %.3f) σ (%.3f, %.3f), cold (%.3f, %.3f) (%.3f, %.3f)",
			warm.CentreX, warm.CentreY, warm.SigmaX, warm.SigmaY, cold.CentreX, cold.CentreY, cold.SigmaX, cold.SigmaY)
	}
}

func TestFeaturesFitFallback(t *testing.T) {
	// Half a Gaussian whose centre lies off the frame: a fit that leaves the
	// frame is replaced by the moments, which stay inside it.
	r := rand.New(rand.NewPCG(8, 9))
	est := gaussField(r, 10, 10, []float64{1}, 1, -2.5, 5, 2, 2, 0, 0.01)
	got, err := FeaturesOf(est, 10, 10, 1, 0.01, nil)
	if err != nil {
		t.Fatal(err)
	}
	if x := float64(got.CentreX); !(x >= -0.5 && x < 2) {
		t.Errorf("centre x %.3f, want inside the frame near the left edge", x)
	}
}

// TestFeaturesFittedFlag: Fitted tells a Gaussian fit from the moments,
// which the mapper uses to try failing fits less often (fitRetryEvery).
func TestFeaturesFittedFlag(t *testing.T) {
	r := rand.New(rand.NewPCG(8, 10))
	noise := make([]float64, 100)
	for i := range noise {
		noise[i] = r.NormFloat64()
	}
	cases := []struct {
		name        string
		est         []float64
		momentsOnly bool
		want        bool
	}{
		{"a Gaussian field", gaussField(r, 10, 10, []float64{1}, 1, 4.5, 5, 2, 1.5, 0.3, 0.01), false, true},
		{"the same, moments only", gaussField(r, 10, 10, []float64{1}, 1, 4.5, 5, 2, 1.5, 0.3, 0.01), true, false},
		{"half a field off the frame (moments)", gaussField(r, 10, 10, []float64{1}, 1, -2.5, 5, 2, 2, 0, 0.01), false, false},
	}
	f, err := NewFeatureFinder(10, 10, 1, 0.01, nil)
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range cases {
		f.MomentsOnly = c.momentsOnly
		var got Features
		if err := f.FeaturesTo(&got, c.est); err != nil {
			t.Fatal(err)
		}
		if f.Fitted != c.want {
			t.Errorf("%s: Fitted %v, want %v", c.name, f.Fitted, c.want)
		}
	}
	// A failing unit is tried again on every 2nd, 4th, then every 8th turn
	// (common practice for retries, no source: an exponential back-off).
	for misses, want := range []int{1, 2, 4, 8, 8, 8} {
		if got := fitRetryEvery(misses); got != want {
			t.Errorf("fitRetryEvery(%d) = %d, want %d", misses, got, want)
		}
	}
}

func TestFeaturesSeparability(t *testing.T) {
	// A product of a spatial map and a temporal profile has rank 1: index 1.
	r := rand.New(rand.NewPCG(1, 1))
	sep := gaussField(r, 8, 6, []float64{0.1, 0.6, 1, 0.2, -0.3}, 1, 3, 2.5, 1.5, 1.5, 0, 0)
	got, err := FeaturesOf(sep, 8, 6, 5, 1.0/60, nil)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(float64(got.Separability)-1) > 1e-12 {
		t.Errorf("separable field: index %.15f, want 1 to 1e-12", got.Separability)
	}
	// A direction-selective field, a grating drifting across the lags
	// (space–time oriented), is far from rank 1.
	const w, h, lags = 12, 4, 6
	ds := make([]float64, w*h*lags)
	for l := range lags {
		for i := range w * h {
			x := float64(i % w)
			ds[l*w*h+i] = math.Cos(2*math.Pi*(x/6-float64(l)/6)) * math.Exp(-(x-5.5)*(x-5.5)/18)
		}
	}
	got, err = FeaturesOf(ds, w, h, lags, 1.0/60, nil)
	if err != nil {
		t.Fatal(err)
	}
	if got.Separability > 0.6 {
		t.Errorf("direction-selective field: index %.3f, want ≤ 0.6", got.Separability)
	}
}

func TestFeaturesPolarity(t *testing.T) {
	// The sign of the largest-magnitude pixel of the peak-lag map.
	cases := []struct {
		name string
		m    []float64
		want int
	}{
		{"bright", []float64{0, 0.2, 1, 0.1}, 1},
		{"dark", []float64{0, -0.2, -1, 0.1}, -1},
		{"dark centre, bright surround of larger total", []float64{0.4, 0.4, -0.9, 0.4}, -1},
		{"bright centre, dark surround", []float64{-0.3, 0.8, -0.3, -0.3}, 1},
		{"zero", []float64{0, 0, 0, 0}, 0},
	}
	for _, c := range cases {
		got, err := FeaturesOf(c.m, 2, 2, 1, 0.01, nil)
		if err != nil {
			t.Fatal(err)
		}
		if got.Polarity != c.want {
			t.Errorf("%s: polarity %d, want %d", c.name, got.Polarity, c.want)
		}
		big := 0.0
		for _, v := range got.Spatial {
			if math.Abs(float64(v)) > math.Abs(big) {
				big = float64(v)
			}
		}
		if big*float64(c.want) < 0 {
			t.Errorf("%s: spatial profile %v disagrees with polarity %d", c.name, got.Spatial, got.Polarity)
		}
	}
}

func TestFeaturesDegrees(t *testing.T) {
	// Visual angle of a size s at distance d is 2·atan(s/(2d)) (textbook
	// geometry); at 57 cm one centimetre subtends about one degree (common
	// practice, no source).
	r := rand.New(rand.NewPCG(2, 3))
	est := gaussField(r, 16, 16, []float64{1, 0.5}, 1, 7.5, 6, 2.5, 1.5, 0.3, 0.01)
	geom := &Geometry{DistanceCM: 57, PixelSizeCM: 0.5}
	got, err := FeaturesOf(est, 16, 16, 2, 1.0/60, geom)
	if err != nil {
		t.Fatal(err)
	}
	dpp := 2 * math.Atan(0.5/(2*57)) * 180 / math.Pi
	if math.Abs(dpp/0.5-1) > 0.01 {
		t.Fatalf("formula check: %.5f deg per 0.5 cm at 57 cm, want ≈ 0.5", dpp)
	}
	pairs := [][2]Float{{got.CentreX, got.CentreXDeg}, {got.CentreY, got.CentreYDeg}, {got.SigmaX, got.SigmaXDeg}, {got.SigmaY, got.SigmaYDeg}}
	for i, p := range pairs {
		if math.Abs(float64(p[1])-float64(p[0])*dpp) > 1e-12 {
			t.Errorf("pair %d: %v pixels gave %v degrees, want %v", i, p[0], p[1], float64(p[0])*dpp)
		}
	}
	got, _ = FeaturesOf(est, 16, 16, 2, 1.0/60, nil)
	if !math.IsNaN(float64(got.SigmaXDeg)) {
		t.Errorf("no geometry: σ %v degrees, want NaN", got.SigmaXDeg)
	}
}

func TestFeaturesErrors(t *testing.T) {
	cases := []struct {
		name       string
		est        []float64
		w, h, lags int
		period     float64
	}{
		{"short", make([]float64, 7), 2, 2, 2, 0.01},
		{"zero width", nil, 0, 2, 2, 0.01},
		{"negative lags", nil, 2, 2, -1, 0.01},
		{"zero period", make([]float64, 8), 2, 2, 2, 0},
		{"NaN period", make([]float64, 8), 2, 2, 2, math.NaN()},
		{"NaN value", []float64{0, 1, 2, math.NaN()}, 2, 2, 1, 0.01},
		{"Inf value", []float64{0, 1, 2, math.Inf(-1)}, 2, 2, 1, 0.01},
	}
	for _, c := range cases {
		if _, err := FeaturesOf(c.est, c.w, c.h, c.lags, c.period, nil); err == nil {
			t.Errorf("%s: no error", c.name)
		}
	}
	got, err := FeaturesOf(make([]float64, 8), 2, 2, 2, 0.01, nil)
	if err != nil || got.Polarity != 0 || !math.IsNaN(float64(got.Separability)) || !math.IsNaN(float64(got.CentreX)) {
		t.Errorf("zero estimate: %+v, %v; want polarity 0 and NaN statistics", got, err)
	}
}

func BenchmarkFeaturesTo(b *testing.B) {
	r := rand.New(rand.NewPCG(4, 4))
	est := gaussField(r, 16, 16, []float64{0, 0.2, 0.7, 1, 0.5, 0, -0.3, -0.2, 0, 0, 0, 0}, 1, 7.2, 8.1, 2.5, 1.4, 0.4, 0.05)
	f, _ := NewFeatureFinder(16, 16, 12, 1.0/60, nil)
	var dst Features
	b.ReportAllocs()
	for b.Loop() {
		if err := f.FeaturesTo(&dst, est); err != nil {
			b.Fatal(err)
		}
	}
}

func ExampleFeaturesOf() {
	// A bright, round field of σ 1.5 pixels centred at column 4, row 3 of an
	// 8×6 frame, strongest two frames (at 60 Hz) before the spike.
	const w, h = 8, 6
	temporal := []float64{0, 0.5, 1, 0.25}
	est := make([]float64, w*h*len(temporal))
	for l, tv := range temporal {
		for i := range w * h {
			dx, dy := float64(i%w)-4, float64(i/w)-3
			est[l*w*h+i] = tv * math.Exp(-(dx*dx+dy*dy)/(2*1.5*1.5))
		}
	}
	f, err := FeaturesOf(est, w, h, len(temporal), 1.0/60, &Geometry{DistanceCM: 57, PixelSizeCM: 1})
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("peak lag %d (%.1f ms), polarity %+d\n", f.PeakLag, f.LatencyMS, f.Polarity)
	fmt.Printf("centre (%.2f, %.2f) px, σ %.2f px = %.2f deg\n", f.CentreX, f.CentreY, f.SigmaX, f.SigmaXDeg)
	fmt.Printf("separability %.3f\n", f.Separability)
	// Output:
	// peak lag 2 (33.3 ms), polarity +1
	// centre (4.00, 3.00) px, σ 1.50 px = 1.51 deg
	// separability 1.000
}

// TestExportFitsEveryShape: a mapper in export mode (PriorInlineAll, one
// update at the end) gives every unit with a field a Gaussian fit in that
// one update; live, only the units whose turn it is are fitted
// (planRefits). Units are simulated LNP cells with Gaussian fields on
// binary noise (the linear–nonlinear–Poisson model, common practice, no
// source).
func TestExportFitsEveryShape(t *testing.T) {
	const w, h, lags, units, bins = 10, 10, 3, 40, 20000
	for _, c := range []struct {
		name   string
		inline int
		want   int
	}{{"export", PriorInlineAll, units}, {"live", 0, fitMin}} {
		t.Run(c.name, func(t *testing.T) {
			m, err := NewMapper(Config{Width: w, Height: h, Lags: lags, White: true, PixelVariance: 1, NoPrior: true, PriorInline: c.inline})
			if err != nil {
				t.Fatal(err)
			}
			defer m.Close()
			r := rand.New(rand.NewPCG(21, 22))
			fields := make([][]float64, units)
			for u := range units {
				m.Unit("u" + strconv.Itoa(u))
				cx, cy := 2+6*r.Float64(), 2+6*r.Float64()
				f := make([]float64, w*h)
				for i := range f {
					dx, dy := float64(i%w)-cx, float64(i/w)-cy
					f[i] = 0.25 * math.Exp(-(dx*dx+dy*dy)/(2*1.5*1.5))
				}
				fields[u] = f
			}
			frame := make([]float64, w*h)
			var counts []Count
			for range bins {
				for i := range frame {
					frame[i] = float64(r.IntN(2)*2 - 1)
				}
				counts = counts[:0]
				for u, f := range fields {
					var drive float64
					for i, v := range frame {
						drive += f[i] * v
					}
					if n := poisson(r, 0.1*math.Exp(drive)); n > 0 {
						counts = append(counts, Count{Unit: u, N: n})
					}
				}
				m.AddBin(frame, counts)
			}
			m.Update()
			fitted := 0
			for u := range units {
				if m.fits[u].gauss {
					fitted++
				}
			}
			if fitted != c.want {
				t.Errorf("%d of %d units have a Gaussian fit after one update, want %d", fitted, units, c.want)
			}
		})
	}
}

// TestGaussJacobian: the Jacobian the fit steps with (kept exponentials of
// the last model call) against central differences of the model (the
// derivative's definition; common practice, no source), at a few
// parameter sets on the whole frame.
func TestGaussJacobian(t *testing.T) {
	const w, h = 9, 7
	f, err := NewFeatureFinder(w, h, 1, 0.01, nil)
	if err != nil {
		t.Fatal(err)
	}
	f.win = f.all
	n := len(f.win)
	out, plus, minus := make([]float64, n), make([]float64, n), make([]float64, n)
	for _, q := range [][gaussParams]float64{
		{1, 4, 3, math.Log(1.5), math.Log(0.8), 0.4, 0.1},
		{-0.5, 2.2, 5.1, math.Log(2.5), math.Log(1.9), -1.1, 0},
		{2, 6.5, 1.5, math.Log(0.7), math.Log(1.2), 1.4, -0.3},
	} {
		f.model(&q, out, true)
		jac := append([]float64(nil), f.jac[:n*gaussParams]...)
		for p := range gaussParams {
			const step = 1e-5
			qp, qm := q, q
			qp[p] += step
			qm[p] -= step
			f.model(&qp, plus, false)
			f.model(&qm, minus, false)
			for k := range n {
				want := (plus[k] - minus[k]) / (2 * step)
				if got := jac[k*gaussParams+p]; math.Abs(got-want) > 1e-8*(1+math.Abs(want)) {
					t.Fatalf("q %v, parameter %d, pixel %d: ∂h %v, central difference %v", q, p, k, got, want)
				}
			}
		}
	}
}
