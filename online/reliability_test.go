package online

import (
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"testing"
)

// TestSpearmanBrown: R = 2r/(1 + r), the Spearman–Brown prophecy formula for
// a doubled test (Spearman 1910; Brown 1910); the worked values are the
// formula evaluated by hand (textbook formula, fact of the trade).
func TestSpearmanBrown(t *testing.T) {
	for _, tc := range []struct{ r, R float64 }{
		{0, 0}, {0.5, 2.0 / 3}, {0.6, 0.75}, {0.8, 16.0 / 18}, {0.9, 18.0 / 19}, {1, 1}, {-0.5, -2},
	} {
		if got := SpearmanBrown(tc.r); math.Abs(got-tc.R) > 1e-15 {
			t.Errorf("SpearmanBrown(%g) = %.12g, want %.12g", tc.r, got, tc.R)
		}
	}
}

func TestSplitHalf(t *testing.T) {
	nan := math.NaN()
	for _, tc := range []struct {
		name string
		a, b []float64
		r, R float64
	}{
		// Deviations (−2,−1,0,1,2) and (−1,−2,1,0,2): Σab = 8, Σa² = Σb² = 10.
		{"worked", []float64{1, 2, 3, 4, 5}, []float64{2, 1, 4, 3, 5}, 0.8, 16.0 / 18},
		{"scaled and shifted", []float64{1, 2, 3}, []float64{10, 30, 50}, 1, 1},
		{"opposite", []float64{1, 2, 3}, []float64{3, 2, 1}, -1, math.Inf(-1)},
		{"lengths differ", []float64{1, 2}, []float64{1, 2, 3}, nan, nan},
		{"constant", []float64{1, 1, 1}, []float64{1, 2, 3}, nan, nan},
		{"too short", []float64{1}, []float64{2}, nan, nan},
	} {
		t.Run(tc.name, func(t *testing.T) {
			r, R := SplitHalf(tc.a, tc.b)
			if !relSameFloat(r, tc.r, 1e-14) || !relSameFloat(R, tc.R, 1e-14) {
				t.Fatalf("SplitHalf = %g, %g; want %g, %g", r, R, tc.r, tc.R)
			}
		})
	}
}

func relSameFloat(got, want, tol float64) bool {
	if math.IsNaN(want) {
		return math.IsNaN(got)
	}
	if math.IsInf(want, 0) {
		return got == want
	}
	return math.Abs(got-want) <= tol
}

// TestProject: hand-worked odds projections. R = 0.5 has odds 1; the
// target 0.9 has odds 9, so 1000 spikes become 9000 and 8000 more at
// 10 spikes/s take 800 s.
func TestProject(t *testing.T) {
	nan := math.NaN()
	for _, tc := range []struct {
		name                  string
		R, spikes, rate, goal float64
		eta                   float64
		ok                    bool
	}{
		{"odds 1 to 9", 0.5, 1000, 10, 0.9, 800, true},
		{"odds 3 to 9", 0.75, 600, 2, 0.9, 600, true}, // N* = 600·9/3 = 1800
		{"reached", 0.95, 1000, 10, 0.9, 0, true},
		{"exactly at target", 0.9, 1000, 10, 0.9, 0, true},
		{"too few spikes", 0.5, 49, 10, 0.9, nan, false},
		{"r negative", -0.1, 1000, 10, 0.9, nan, false},
		{"r zero", 0, 1000, 10, 0.9, nan, false},
		{"no rate", 0.5, 1000, 0, 0.9, nan, false},
		{"target 1", 0.5, 1000, 10, 1, nan, false},
		{"NaN reliability", nan, 1000, 10, 0.9, nan, false},
	} {
		t.Run(tc.name, func(t *testing.T) {
			eta, ok := Project(tc.R, tc.spikes, tc.rate, tc.goal)
			if ok != tc.ok || !relSameFloat(eta, tc.eta, 1e-9) {
				t.Fatalf("Project = %g, %v; want %g, %v", eta, ok, tc.eta, tc.ok)
			}
		})
	}
}

func TestTrend(t *testing.T) {
	tr := NewTrend(8)
	if _, ok := tr.Project(10, 0.9); ok {
		t.Fatal("empty trend projected")
	}
	// Odds exactly N/1000 (R = q/(1+q)), so β = 0.001 and the target 0.9
	// (odds 9) needs 9000 spikes; from 700 at 10 spikes/s: 830 s.
	for n := 100.0; n <= 700; n += 100 {
		q := n / 1000
		tr.Add(n, q/(1+q))
	}
	beta, ok := tr.Slope()
	if !ok || math.Abs(beta-0.001) > 1e-15 {
		t.Fatalf("Slope = %g, %v; want 0.001", beta, ok)
	}
	if eta, ok := tr.Project(10, 0.9); !ok || math.Abs(eta-830) > 1e-9 {
		t.Fatalf("Project = %g, %v; want 830", eta, ok)
	}
	// A fall in the spike count starts a new history.
	tr.Add(50, 0.2)
	if tr.Len() != 1 {
		t.Fatalf("Len = %d after a restart, want 1", tr.Len())
	}
	if _, ok := tr.Slope(); ok {
		t.Fatal("slope from one point")
	}
	// One point: the single-point rule (odds 0.25 → 9: 50·36 = 1800 spikes).
	if eta, ok := tr.Project(5, 0.9); !ok || math.Abs(eta-350) > 1e-9 {
		t.Fatalf("single-point Project = %g, %v; want 350", eta, ok)
	}
	// The ring keeps the last 8 points.
	for n := 100.0; n <= 2000; n += 100 {
		tr.Add(n, 0.5)
	}
	if tr.Len() != 8 {
		t.Fatalf("Len = %d, want 8", tr.Len())
	}
}

func TestTrendDoesNotAllocate(t *testing.T) {
	tr := NewTrend(30)
	n := 100.0
	if a := testing.AllocsPerRun(100, func() {
		n += 10
		tr.Add(n, 0.5)
		tr.Project(10, 0.9)
	}); a != 0 {
		t.Fatalf("Trend.Add and Project allocate %g times", a)
	}
}

// relSimulate simulates a unit whose half estimates are a fixed field
// plus noise whose variance falls as 1/N: each spike adds an independent
// N(0, σ²) draw per coefficient to its half's running sum, so a half with
// n spikes has noise variance σ²/n. With field variance s² across the d
// coefficients the odds of R grow as N·s²/σ²: R crosses 0.9 near
// N = 9σ²/s² spikes. It returns (N, R) every step spikes.
func relSimulate(rng *rand.Rand, d int, sigma float64, step, maxN int) (ns, rs []float64) {
	field := make([]float64, d)
	for i := range field {
		field[i] = rng.NormFloat64()
	}
	sums := [2][]float64{make([]float64, d), make([]float64, d)}
	a, b := make([]float64, d), make([]float64, d)
	half := step / 2
	for n := step; n <= maxN; n += step {
		for h := range sums {
			for i := range sums[h] {
				sums[h][i] += sigma * math.Sqrt(float64(half)) * rng.NormFloat64()
			}
		}
		nh := float64(n / 2)
		for i := range field {
			a[i] = field[i] + sums[0][i]/nh
			b[i] = field[i] + sums[1][i]/nh
		}
		_, R := SplitHalf(a, b)
		ns, rs = append(ns, float64(n)), append(rs, R)
	}
	return ns, rs
}

// TestProjectSimulation: from the first 2000 spikes (R near 0.67) the
// projected spikes to R = 0.9 land within 30 % of the count at which the
// simulated R first reaches 0.9 (about 9000), for each of 20 seeded units,
// and within 12 % on average; the fit over the history must do as well.
// Between 1000 and 4000 spikes the fit's successive projections must also
// vary less (relative SD of N* over the updates, mean over units) than the
// single-point projections.
func TestProjectSimulation(t *testing.T) {
	const (
		d      = 1000
		sigma  = 31.6227766 // σ² = 1000 with s² ≈ 1: crossing near 9000 spikes
		step   = 100
		early  = 2000
		target = 0.9
		rate   = 10.0
	)
	var errSingle, errFit []float64
	var wobbleSingle, wobbleFit float64
	for seed := uint64(0); seed < 20; seed++ {
		rng := rand.New(rand.NewPCG(seed, 99))
		ns, rs := relSimulate(rng, d, sigma, step, 30000)
		cross := slices.IndexFunc(rs, func(r float64) bool { return r >= target })
		if cross < 0 {
			t.Fatalf("seed %d: R never reached %g", seed, target)
		}
		actual := ns[cross]
		tr := NewTrend(20)
		var seqSingle, seqFit []float64
		for i := range ns {
			if ns[i] > 4000 {
				break
			}
			tr.Add(ns[i], rs[i])
			if ns[i] < 1000 {
				continue
			}
			e1, ok1 := Project(rs[i], ns[i], rate, target)
			e2, ok2 := tr.Project(rate, target)
			if ok1 && ok2 {
				seqSingle = append(seqSingle, ns[i]+e1*rate)
				seqFit = append(seqFit, ns[i]+e2*rate)
			}
		}
		wobbleSingle += relRelSD(seqSingle) / 20
		wobbleFit += relRelSD(seqFit) / 20
		tr.Reset()
		var i int
		for i = 0; ns[i] <= early; i++ {
			tr.Add(ns[i], rs[i])
		}
		n, R, _ := tr.Latest()
		eta, ok := Project(R, n, rate, target)
		etaFit, okFit := tr.Project(rate, target)
		if !ok || !okFit {
			t.Fatalf("seed %d: too early at N = %g, R = %g", seed, n, R)
		}
		for _, c := range []struct {
			name string
			eta  float64
			errs *[]float64
		}{{"single point", eta, &errSingle}, {"fit", etaFit, &errFit}} {
			got := n + c.eta*rate
			e := math.Abs(got-actual) / actual
			*c.errs = append(*c.errs, e)
			if e > 0.3 {
				t.Errorf("seed %d %s: projected N* = %.0f, R reached %g at N = %.0f", seed, c.name, got, target, actual)
			}
		}
	}
	t.Logf("relative SD of successive N*: single point %.3f, fit %.3f", wobbleSingle, wobbleFit)
	if !(wobbleFit < wobbleSingle) {
		t.Errorf("the fit (%.3f) is not steadier than the single point (%.3f)", wobbleFit, wobbleSingle)
	}
	for _, c := range []struct {
		name string
		errs []float64
	}{{"single point", errSingle}, {"fit", errFit}} {
		var m float64
		for _, e := range c.errs {
			m += e
		}
		m /= float64(len(c.errs))
		t.Logf("%s: mean relative error of N* %.3f", c.name, m)
		if m > 0.12 {
			t.Errorf("%s: mean relative error %.3f, want ≤ 0.12", c.name, m)
		}
	}
}

// relRelSD is the standard deviation of v divided by its mean.
func relRelSD(v []float64) float64 {
	var m, s float64
	for _, x := range v {
		m += x
	}
	m /= float64(len(v))
	for _, x := range v {
		s += (x - m) * (x - m)
	}
	return math.Sqrt(s/float64(len(v)-1)) / m
}

// TestSplitHalfNull: spikes independent of a binary stimulus; the split-half
// r of the STA halves must centre on zero: the mean over 300 independent
// units lies within 4 standard errors (CLT bound; common practice, no
// source) of 0, and its spread is near 1/sqrt(D) for D independent pairs.
func TestSplitHalfNull(t *testing.T) {
	const P, L, units, c = 8, 4, 300, 0.5
	rng := rand.New(rand.NewPCG(31, 32))
	s := NewSTA(P, L)
	y := make([]float64, 2000)
	a, b := make([]float64, P*L), make([]float64, P*L)
	rs := make([]float64, 0, units)
	for u := 0; u < units; u++ {
		for k := range y {
			y[k] = nullPoisson(rng, 0.3)
		}
		nullSimulateWhite(rng, s, P, L, c, y, nil, 0, 0)
		s.HalvesTo(a, b, 0)
		r, _ := SplitHalf(a, b)
		rs = append(rs, r)
	}
	var m, v float64
	for _, r := range rs {
		m += r
	}
	m /= units
	for _, r := range rs {
		v += (r - m) * (r - m)
	}
	sd := math.Sqrt(v / (units - 1))
	if math.Abs(m) > 4*sd/math.Sqrt(units) {
		t.Errorf("mean null r = %.4f, want 0 ± %.4f", m, 4*sd/math.Sqrt(units))
	}
	if want := 1 / math.Sqrt(P*L); math.Abs(sd-want) > 0.25*want {
		t.Errorf("sd of null r = %.4f, want about %.4f", sd, want)
	}
}

func ExampleSplitHalf() {
	a := []float64{1, 2, 3, 4, 5}
	b := []float64{2, 1, 4, 3, 5}
	r, R := SplitHalf(a, b)
	fmt.Printf("r = %.3f, R = %.3f\n", r, R)
	// Output: r = 0.800, R = 0.889
}

func ExampleProject() {
	// R = 0.5 after 1000 spikes at 10 spikes/s: the odds must grow from 1 to 9.
	eta, ok := Project(0.5, 1000, 10, 0.9)
	fmt.Printf("%.0f s %v\n", eta, ok)
	_, ok = Project(0.5, 20, 10, 0.9)
	fmt.Println("20 spikes:", ok)
	// Output:
	// 800 s true
	// 20 spikes: false
}

func BenchmarkSplitHalf(b *testing.B) {
	for _, d := range []int{768, 12288} {
		b.Run(fmt.Sprintf("D=%d", d), func(b *testing.B) {
			rng := rand.New(rand.NewPCG(1, 1))
			x, y := make([]float64, d), make([]float64, d)
			for i := range x {
				x[i], y[i] = rng.NormFloat64(), rng.NormFloat64()
			}
			b.ReportAllocs()
			for b.Loop() {
				SplitHalf(x, y)
			}
		})
	}
}
