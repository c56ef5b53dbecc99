package synth

import (
	"bytes"
	"encoding/json"
	"math"
	"math/rand/v2"
	"os"
	"reflect"
	"strings"
	"testing"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat"

	"livefield/stream/stimulus"
)

func binary(t testing.TB, side int, seed uint64) stimulus.Source {
	t.Helper()
	src, err := stimulus.Open(stimulus.Spec{Type: "binary", Width: side, Height: side, Seed: seed}, "")
	if err != nil {
		t.Fatal(err)
	}
	return src
}

// run plays bins [0, n) with consecutive frames and calls fn after each bin
// (the ring then holds the bin's frames).
func run(t testing.TB, r *Cortex, n int64, emit func(string, float64), fn func(k int64)) {
	t.Helper()
	dt := r.sc.FramePeriod
	for k := range n {
		if err := r.Bin(k, k, r.sc.Start+float64(k)*dt, r.sc.Start+float64(k+1)*dt, emit); err != nil {
			t.Fatal(err)
		}
		if fn != nil {
			fn(k)
		}
	}
}

func TestNewRejects(t *testing.T) {
	src := binary(t, 16, 1)
	tests := []struct {
		name string
		sc   Scenario
		want string
	}{
		{"size mismatch", Scenario{Width: 8, Height: 8}, "synth: source is 16×16"},
		{"negative lags", Scenario{Lags: -1}, "synth: negative size"},
		{"bad period", Scenario{FramePeriod: -1}, "synth: frame period"},
		{"bad rate", Scenario{MeanRate: 1e6}, "synth: rates"},
		{"bad gain", Scenario{Gain: 10}, "synth: gain"},
		{"nan start", Scenario{Start: math.NaN()}, "synth: start"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, err := New(tc.sc, src)
			if err == nil || !strings.HasPrefix(err.Error(), tc.want) {
				t.Fatalf("New(%+v) error %v, want prefix %q", tc.sc, err, tc.want)
			}
		})
	}
	if _, err := New(Scenario{}, nil); err == nil {
		t.Fatal("nil source accepted")
	}
}

func TestBinRejects(t *testing.T) {
	r, err := New(Scenario{Seed: 1}, binary(t, 16, 1))
	if err != nil {
		t.Fatal(err)
	}
	emit := func(string, float64) {}
	for _, tc := range []struct {
		name       string
		k, f       int64
		start, end float64
	}{
		{"negative bin", -1, 0, 0, 1},
		{"empty bin", 0, 0, 1, 1},
		{"negative frame", 0, -1, 0, 1},
	} {
		if err := r.Bin(tc.k, tc.f, tc.start, tc.end, emit); err == nil || !strings.HasPrefix(err.Error(), "synth: ") {
			t.Errorf("%s: error %v", tc.name, err)
		}
	}
}

// The default population has the documented mix, and its truth is
// consistent: unique ids, latencies 40–90 ms, unit-norm filters.
func TestDefaultPopulation(t *testing.T) {
	r, err := New(Scenario{Seed: 7}, binary(t, 16, 1))
	if err != nil {
		t.Fatal(err)
	}
	units := r.Units()
	count := map[string]int{}
	ids := map[string]bool{}
	for _, u := range units {
		count[u.Kind]++
		if ids[u.ID] {
			t.Errorf("duplicate id %s", u.ID)
		}
		ids[u.ID] = true
		if u.Channel < 0 || u.Channel >= DefaultChannels {
			t.Errorf("%s: channel %d", u.ID, u.Channel)
		}
		if u.Kind != KindNone && (u.LatencyMS < 40 || u.LatencyMS > 90) {
			t.Errorf("%s: latency %g ms outside 40–90", u.ID, u.LatencyMS)
		}
		for _, w := range append([][]float64{u.Filter}, u.Pair...) {
			if w == nil {
				continue
			}
			if n := mat.Norm(mat.NewVecDense(len(w), w), 2); math.Abs(n-1) > 1e-12 {
				t.Errorf("%s: filter norm %g", u.ID, n)
			}
		}
	}
	want := map[string]int{KindSimple: 5, KindCentreSurround: 3, KindComplex: 2, KindNone: 2, KindDirection: 1, KindLowRate: 1, KindLate: 1}
	if !reflect.DeepEqual(count, want) {
		t.Fatalf("mix %v, want %v", count, want)
	}
}

// separability is σ₁²/Σσᵢ² of the lags×pixels matrix of a filter (1 for a
// space–time separable field), by gonum's SVD.
func separability(t *testing.T, w []float64, lags int) float64 {
	var svd mat.SVD
	if !svd.Factorize(mat.NewDense(lags, len(w)/lags, w), mat.SVDNone) {
		t.Fatal("SVD failed")
	}
	s := svd.Values(nil)
	var sum float64
	for _, v := range s {
		sum += v * v
	}
	return s[0] * s[0] / sum
}

// Simple and centre-surround fields are a spatial profile times a time
// course (separable); the direction-selective field is not, and the pair of
// a complex cell is orthogonal (Adelson & Bergen 1985: quadrature pair).
func TestFieldStructure(t *testing.T) {
	r, err := New(Scenario{Seed: 3}, binary(t, 16, 1))
	if err != nil {
		t.Fatal(err)
	}
	for _, u := range r.Units() {
		switch u.Kind {
		case KindSimple, KindCentreSurround, KindLowRate, KindLate:
			if s := separability(t, u.Filter, u.Shape[0]); s < 0.999 {
				t.Errorf("%s (%s): separability %g, want 1", u.ID, u.Kind, s)
			}
		case KindDirection:
			if s := separability(t, u.Filter, u.Shape[0]); s > 0.8 {
				t.Errorf("%s: direction field separability %g, want well below 1", u.ID, s)
			}
		case KindComplex:
			if d := mat.Dot(mat.NewVecDense(len(u.Pair[0]), u.Pair[0]), mat.NewVecDense(len(u.Pair[1]), u.Pair[1])); math.Abs(d) > 1e-12 {
				t.Errorf("%s: pair dot product %g, want 0", u.ID, d)
			}
		}
	}
}

// The spike count of each unit is within a Poisson bound of the integral
// of its model rate (a count of Poisson mean Λ lies within 4.5√Λ of Λ with
// probability above 0.99999: normal approximation, common practice, no
// source), and responsive units fire near the scenario's mean rate under
// white noise.
func TestRatesPoisson(t *testing.T) {
	sc := Scenario{Seed: 11, Width: 8, Height: 8, Lags: 8, LateAt: 20}
	r, err := New(sc, binary(t, 8, 2))
	if err != nil {
		t.Fatal(err)
	}
	index := map[string]int{}
	for i, u := range r.Units() {
		index[u.ID] = i
	}
	n := make([]float64, len(r.units))
	lam := make([]float64, len(r.units))
	const bins = 60 * 60
	dt := r.sc.FramePeriod
	run(t, r, bins, func(id string, _ float64) { n[index[id]]++ }, func(k int64) {
		start := float64(k) * dt
		for i := range r.units {
			if start >= r.units[i].appear {
				lam[i] += r.rate(&r.units[i], k) * dt
			}
		}
	})
	for i, u := range r.Units() {
		if d := math.Abs(n[i] - lam[i]); d > 4.5*math.Sqrt(lam[i])+1 {
			t.Errorf("%s (%s): %v spikes, model mean %.1f", u.ID, u.Kind, n[i], lam[i])
		}
		span := float64(bins)*dt - (u.AppearsAt - sc.Start)
		if got := lam[i] / span; math.Abs(got-u.RateHz) > 0.2*u.RateHz {
			t.Errorf("%s (%s): model mean rate %.2f Hz, scenario %.2f Hz", u.ID, u.Kind, got, u.RateHz)
		}
	}
	// The late unit is silent before it appears.
	for i, u := range r.Units() {
		if u.Kind == KindLate && lam[i] > (float64(bins)*dt-20)*MaxRate {
			t.Errorf("late unit integrated rate %g before appearing", lam[i])
		}
	}
}

// Under white noise the spike-triggered average of an LNP neuron is
// proportional to its linear filter (Chichilnisky 2001, Network 12:199–213).
// The STA of each simple cell, computed here from the rig's own spikes,
// must correlate with its true filter, and far less with another cell's.
func TestSTAMatchesFilter(t *testing.T) {
	const side, lags = 8, 8
	sc := Scenario{Seed: 5, Width: side, Height: side, Lags: lags, Units: 4, MeanRate: 40}
	src := binary(t, side, 9)
	r, err := New(sc, src)
	if err != nil {
		t.Fatal(err)
	}
	units := r.Units()
	index := map[string]int{}
	for i, u := range units {
		index[u.ID] = i
	}
	n := side * side
	sta := make([][]float64, len(units))
	spikes := make([]float64, len(units))
	for i := range sta {
		sta[i] = make([]float64, lags*n)
	}
	var binSpikes []int
	run(t, r, 240*60, func(id string, _ float64) { binSpikes = append(binSpikes, index[id]) }, func(k int64) {
		for _, i := range binSpikes {
			spikes[i]++
			for lag := range int64(lags) {
				if k-lag < 0 {
					break
				}
				f := r.ring[(k-lag)%lags]
				for p, v := range f {
					sta[i][int(lag)*n+p] += v
				}
			}
		}
		binSpikes = binSpikes[:0]
	})
	var simple []int
	for i, u := range units {
		if u.Kind == KindSimple {
			simple = append(simple, i)
		}
	}
	if len(simple) != 2 {
		t.Fatalf("want two simple cells in the first four units, have %d", len(simple))
	}
	for _, i := range simple {
		c := stat.Correlation(sta[i], units[i].Filter, nil)
		if c < 0.85 {
			t.Errorf("%s: STA–filter correlation %.3f after %v spikes, want ≥ 0.85", units[i].ID, c, spikes[i])
		}
		other := simple[0] + simple[1] - i
		if x := math.Abs(stat.Correlation(sta[i], units[other].Filter, nil)); x > c/2 {
			t.Errorf("%s: correlation with another cell's filter %.3f, own %.3f", units[i].ID, x, c)
		}
	}
}

// The Poisson sampler's counts follow the Poisson law: a chi-square
// goodness-of-fit test against probabilities and the 0.999 critical value
// from SciPy (testdata/synth/poisson_ref.py, its output poisson_ref.json).
func TestPoissonSampler(t *testing.T) {
	raw, err := os.ReadFile("../../testdata/synth/poisson_ref.json")
	if err != nil {
		t.Fatal(err)
	}
	var ref struct {
		Cases []struct {
			Lambda  float64   `json:"lambda"`
			First   int       `json:"first"`
			Probs   []float64 `json:"probs"`
			Chi2999 float64   `json:"chi2_999"`
		} `json:"cases"`
	}
	if err := json.Unmarshal(raw, &ref); err != nil {
		t.Fatal(err)
	}
	const draws = 200000
	for _, c := range ref.Cases {
		rng := rand.New(rand.NewPCG(42, math.Float64bits(c.Lambda)))
		obs := make([]float64, len(c.Probs))
		for range draws {
			n := poisson(rng, c.Lambda)
			cell := min(max(n-c.First, 0), len(obs)-1)
			obs[cell]++
		}
		var chi2 float64
		for i, p := range c.Probs {
			e := p * draws
			chi2 += (obs[i] - e) * (obs[i] - e) / e
		}
		if chi2 > c.Chi2999 {
			t.Errorf("λ=%g: χ² = %.1f above the 0.999 quantile %.1f (df %d)", c.Lambda, chi2, c.Chi2999, len(c.Probs)-1)
		}
	}
}

// The same seed gives the same spikes; bin k depends only on the seed, k
// and the frames in its lags, not on the bins asked for before.
func TestDeterminism(t *testing.T) {
	type sp struct {
		id string
		t  float64
	}
	collect := func(seed uint64, from int64) []sp {
		r, err := New(Scenario{Seed: seed, Width: 8, Height: 8}, binary(t, 8, 1))
		if err != nil {
			t.Fatal(err)
		}
		var out []sp
		dt := r.sc.FramePeriod
		for k := from; k < 600; k++ {
			err := r.Bin(k, k, float64(k)*dt, float64(k+1)*dt, func(id string, tt float64) {
				if k >= 300 {
					out = append(out, sp{id, tt})
				}
			})
			if err != nil {
				t.Fatal(err)
			}
		}
		return out
	}
	a, b := collect(1, 0), collect(1, 0)
	if len(a) == 0 || !reflect.DeepEqual(a, b) {
		t.Fatalf("same seed: %d and %d spikes differ", len(a), len(b))
	}
	if c := collect(1, 300-DefaultLags); !reflect.DeepEqual(a, c) {
		t.Fatal("bins after a late start (with their lags) differ from a full run")
	}
	if d := collect(2, 0); reflect.DeepEqual(a, d) {
		t.Fatal("different seeds give the same spikes")
	}
	for i := 1; i < len(a); i++ {
		if a[i].t < a[i-1].t {
			t.Fatalf("spikes out of time order at %d", i)
		}
	}
}

func TestTruthRoundTrip(t *testing.T) {
	r, err := New(Scenario{Seed: 9, Width: 8, Height: 8}, binary(t, 8, 1))
	if err != nil {
		t.Fatal(err)
	}
	var buf bytes.Buffer
	if err := WriteTruth(&buf, r.Units()); err != nil {
		t.Fatal(err)
	}
	got, err := ReadTruth(&buf)
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(got, r.Units()) {
		t.Fatal("truth changed in a JSON round trip")
	}
	if _, err := ReadTruth(strings.NewReader(`{"units":[{"idd":"x"}]}`)); err == nil || !strings.HasPrefix(err.Error(), "synth: ") {
		t.Fatalf("unknown field: error %v", err)
	}
}

func TestBinNoAlloc(t *testing.T) {
	r, err := New(Scenario{Seed: 1}, binary(t, 16, 1))
	if err != nil {
		t.Fatal(err)
	}
	emit := func(string, float64) {}
	dt := r.sc.FramePeriod
	k := int64(0)
	step := func() {
		_ = r.Bin(k, k, float64(k)*dt, float64(k+1)*dt, emit)
		k++
	}
	for range 100 {
		step()
	}
	if n := testing.AllocsPerRun(200, step); n != 0 {
		t.Fatalf("Bin allocates %v times per bin", n)
	}
}

func BenchmarkBin(b *testing.B) {
	r, err := New(Scenario{Seed: 1}, binary(b, 16, 1))
	if err != nil {
		b.Fatal(err)
	}
	emit := func(string, float64) {}
	dt := r.sc.FramePeriod
	b.ReportAllocs()
	k := int64(0)
	for b.Loop() {
		if err := r.Bin(k, k, float64(k)*dt, float64(k+1)*dt, emit); err != nil {
			b.Fatal(err)
		}
		k++
	}
	b.ReportMetric(float64(b.N)*dt/b.Elapsed().Seconds(), "x-realtime")
}
