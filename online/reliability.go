package online

import "math"

// MinProjectSpikes is the fewest spikes at which Project gives a time: below
// it the split-half correlation is too noisy to extrapolate ("too early").
const MinProjectSpikes = 50

// MinTrendPoints is the fewest usable history points for which Trend fits
// the odds against the spike count instead of projecting from one point.
const MinTrendPoints = 5

// SplitHalf returns the Pearson correlation r between the estimates a and b
// from the two halves of the data and its Spearman–Brown correction
// R = 2r/(1 + r) (Spearman 1910; Brown 1910), the reliability of the
// estimate from all the data. Both are NaN when the lengths differ, are
// shorter than 2, or either estimate is constant; R is −Inf for r = −1.
func SplitHalf(a, b []float64) (r, R float64) {
	n := len(a)
	if n != len(b) || n < 2 {
		return math.NaN(), math.NaN()
	}
	var sa, sb float64
	for i := range a {
		sa += a[i]
		sb += b[i]
	}
	return splitHalfSums(a, b, sa, sb)
}

// splitHalfSums is SplitHalf for a caller that has the sums of a and of b
// (each added in index order) at hand.
func splitHalfSums(a, b []float64, sa, sb float64) (r, R float64) {
	n := len(a)
	if n != len(b) || n < 2 {
		return math.NaN(), math.NaN()
	}
	ma, mb := sa/float64(n), sb/float64(n)
	b = b[:n]
	var sab, saa, sbb float64
	for i := range a {
		da, db := a[i]-ma, b[i]-mb
		sab += da * db
		saa += da * da
		sbb += db * db
	}
	if !(saa > 0) || !(sbb > 0) {
		return math.NaN(), math.NaN()
	}
	r = sab / math.Sqrt(saa*sbb)
	r = math.Max(-1, math.Min(1, r))
	return r, SpearmanBrown(r)
}

// SpearmanBrown is R = 2r/(1 + r), the reliability of a measure twice as long
// as one whose halves correlate r.
func SpearmanBrown(r float64) float64 { return 2 * r / (1 + r) }

// Odds is R/(1 − R), the quantity that grows in proportion to the spike
// count when the estimation noise variance falls as 1/N.
func Odds(R float64) float64 { return R / (1 - R) }

// Project returns the seconds until the reliability R, reached with the given
// number of spikes at the given spike rate (per second), is expected to reach
// target. The model: with estimation noise variance ∝ 1/N the odds
// R/(1 − R) grow in proportion to N, so the target needs
// N* = N·Odds(target)/Odds(R) spikes and the time left is (N* − N)/rate.
//
// ok is false ("too early") when spikes < MinProjectSpikes, when R ≤ 0
// (equivalently r ≤ 0), when an input is NaN, or when the rate or target
// (which must lie in (0, 1)) make no time. Otherwise eta is 0 once R ≥ target.
func Project(R, spikes, rate, target float64) (eta float64, ok bool) {
	if !(spikes >= MinProjectSpikes) || !(R > 0) || !(target > 0 && target < 1) {
		return math.NaN(), false
	}
	if R >= target {
		return 0, true
	}
	if !(rate > 0) || math.IsInf(rate, 0) {
		return math.NaN(), false
	}
	need := spikes * Odds(target) / Odds(R)
	return (need - spikes) / rate, true
}

// Trend keeps the recent history of one unit's reliability against its
// spike count and projects the time to target from a least-squares fit
// through the origin of the odds R/(1 − R) against N over that history,
// which is steadier than Project from the latest point alone. The zero value
// is not usable; make one with NewTrend. A Trend does not allocate after
// NewTrend and is not safe for concurrent use.
type Trend struct {
	spikes, rel []float64 // ring of points
	next, n     int
}

// NewTrend returns a trend that keeps the last capacity points (at least
// MinTrendPoints).
func NewTrend(capacity int) *Trend {
	capacity = max(capacity, MinTrendPoints)
	return &Trend{spikes: make([]float64, capacity), rel: make([]float64, capacity)}
}

// Add records the reliability R reached with the given spike count. Points
// whose spike count does not exceed the latest one's are taken as a new
// start: the history is cleared first.
func (t *Trend) Add(spikes, R float64) {
	if t.n > 0 && !(spikes > t.spikes[t.last()]) {
		t.Reset()
	}
	t.spikes[t.next] = spikes
	t.rel[t.next] = R
	t.next = (t.next + 1) % len(t.spikes)
	t.n = min(t.n+1, len(t.spikes))
}

func (t *Trend) last() int { return (t.next - 1 + len(t.spikes)) % len(t.spikes) }

// Len is the number of points kept.
func (t *Trend) Len() int { return t.n }

// Latest returns the last point added; ok is false when there is none.
func (t *Trend) Latest() (spikes, R float64, ok bool) {
	if t.n == 0 {
		return 0, math.NaN(), false
	}
	i := t.last()
	return t.spikes[i], t.rel[i], true
}

// Reset forgets the history.
func (t *Trend) Reset() { t.next, t.n = 0, 0 }

// Slope returns β of the fit odds ≈ β·N by least squares through the origin
// over the kept points with N ≥ MinProjectSpikes and a finite R < 1 (points
// with R ≤ 0 are kept: dropping them would bias β upwards). ok is false with
// fewer than MinTrendPoints such points.
func (t *Trend) Slope() (beta float64, ok bool) {
	var snq, snn float64
	used := 0
	for i := 0; i < t.n; i++ {
		n, r := t.spikes[i], t.rel[i]
		if !(n >= MinProjectSpikes) || !(r < 1) || math.IsNaN(r) || math.IsInf(r, 0) {
			continue
		}
		snq += n * Odds(r)
		snn += n * n
		used++
	}
	if used < MinTrendPoints {
		return math.NaN(), false
	}
	return snq / snn, true
}

// Project returns the seconds until the target reliability at the given
// spike rate. The latest point decides "too early" and "reached" as in the
// function Project. With enough points (see Slope) and β > 0 the spikes
// needed are N* = Odds(target)/β; when the fit has no positive slope or puts
// N* at or below the current count while R is still short of the target,
// the single-point projection from the latest point is used instead.
func (t *Trend) Project(rate, target float64) (eta float64, ok bool) {
	n, r, ok := t.Latest()
	if !ok {
		return math.NaN(), false
	}
	eta, ok = Project(r, n, rate, target)
	if !ok || eta == 0 {
		return eta, ok
	}
	beta, fit := t.Slope()
	if !fit || !(beta > 0) {
		return eta, ok
	}
	need := Odds(target) / beta
	if need <= n {
		return eta, ok
	}
	return (need - n) / rate, true
}
