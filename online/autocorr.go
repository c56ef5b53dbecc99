package online

import (
	"math"

	"gonum.org/v1/gonum/mat"
)

// autocorrLags is K, the longest lag d of the spike counts' autocovariance
// that the correlated-stimulus test uses: terms A(d)·ρ(d + i − j) with
// |d| > K are dropped, which is safe once the stimulus's own temporal
// correlation ρ has decayed (a movie correlated over more than half a second
// at 60 Hz would need more).
const autocorrLags = 32

// countAutocov keeps, per unit, the lag products S_d = Σ_k y_k y_{k+d}
// (d = 0…K) of the spike counts over the used bins, the first K counts and
// the unit's recent non-zero counts (those within K bins of its latest), from
// which the centred autocovariance A(d) = Σ_k (y_k − ȳ)(y_{k+d} − ȳ) follows
// exactly. A new count pairs only with the recent non-zero counts, so its
// cost follows the unit's rate, not K.
type countAutocov struct {
	k      int
	sums   [][]float64     // per unit, K+1 lag products
	head   [][]float64     // per unit, counts of the first K bins
	recent [][]recentCount // per unit, its non-zero counts of the last K+1 bins, oldest first
}

// recentCount is a unit's count in one bin.
type recentCount struct {
	bin int64
	n   float64
}

func newCountAutocov(k int) *countAutocov { return &countAutocov{k: k} }

func (c *countAutocov) grow(units int) {
	for len(c.sums) < units {
		c.sums = append(c.sums, make([]float64, c.k+1))
		c.head = append(c.head, make([]float64, c.k))
		c.recent = append(c.recent, make([]recentCount, 0, c.k+1))
	}
}

func (c *countAutocov) reset() {
	for u := range c.sums {
		clear(c.sums[u])
		clear(c.head[u])
		c.recent[u] = c.recent[u][:0]
	}
}

// add records count n of unit u in used bin b (bins counted from 0, in
// increasing order; only non-zero counts need be given; a unit listed twice
// in a bin has its counts added). It returns the unit's count in the bin
// before this one was added.
func (c *countAutocov) add(u int, b int64, n float64) (before float64) {
	K := int64(c.k)
	s, rc := c.sums[u], c.recent[u]
	same := false // the unit already has a count in bin b
	if last := len(rc) - 1; last >= 0 && rc[last].bin == b {
		before, same = rc[last].n, true
		rc = rc[:last] // the earlier bins only, for the pairs below
	}
	s[0] += n * (2*before + n)
	drop := 0 // counts now more than K bins back
	for _, r := range rc {
		d := b - r.bin
		if d > K {
			drop++
			continue
		}
		s[d] += n * r.n
	}
	if !same {
		if drop > 0 {
			rc = append(rc[:0], rc[drop:]...)
		}
		rc = append(rc, recentCount{bin: b, n: n})
	} else {
		rc = rc[:len(rc)+1]
		rc[len(rc)-1].n = before + n
	}
	c.recent[u] = rc
	if b < K {
		c.head[u][b] = before + n
	}
	return before
}

// countAt is unit u's count in bin j, which must be among the last K+1 bins
// up to the unit's latest count.
func (c *countAutocov) countAt(u int, j int64) float64 {
	for _, r := range c.recent[u] {
		if r.bin == j {
			return r.n
		}
	}
	return 0
}

// autocovTo writes A(0…K) of unit u over m used bins with spike total sy.
// A(d) = S_d − ȳ(Σ_{k<m−d} y_k + Σ_{k≥d} y_k) + (m − d)ȳ², where the two
// partial sums are sy minus the last d and the first d counts.
func (c *countAutocov) autocovTo(dst []float64, u int, m int64, sy float64) {
	clear(dst)
	if m == 0 || u >= len(c.sums) {
		return
	}
	K := int64(c.k)
	mean := sy / float64(m)
	var headSum, tailSum float64
	for d := int64(0); d <= K && d < m && d < int64(len(dst)); d++ {
		if d > 0 {
			if d-1 < K {
				headSum += c.head[u][d-1]
			}
			tailSum += c.countAt(u, m-d)
		}
		dst[d] = c.sums[u][d] - mean*(2*sy-headSum-tailSum) + float64(m-d)*mean*mean
	}
}

// frameAutocorr keeps the stimulus's temporal autocorrelation averaged over
// pixels, ρ(τ) = C(τ)/C(0) with C(τ) = mean over pixels of the covariance
// of a pixel with itself τ frames later, for τ = 0…maxLag.
type frameAutocorr struct {
	pixels, maxLag int
	ring           [][]float64 // last maxLag+1 frames
	n, since       int64
	// cross[τ] = Σ_m s_m s_{m−τ}ᵀ (P×P, row: the later frame's pixel), kept
	// for frames of at most exactPixels pixels.
	cross      [][]float64
	crossPairs []int64   // frame pairs in cross, per τ
	prod       []float64 // Σ_m s_m·s_{m−τ}, per τ
	pairs      []int64
	sum        []float64 // per pixel, Σ s_m
}

func newFrameAutocorr(pixels, maxLag int) *frameAutocorr {
	f := &frameAutocorr{pixels: pixels, maxLag: maxLag,
		ring: make([][]float64, maxLag+1), prod: make([]float64, maxLag+1),
		pairs: make([]int64, maxLag+1), sum: make([]float64, pixels)}
	for i := range f.ring {
		f.ring[i] = make([]float64, pixels)
	}
	if pixels <= exactPixels {
		f.cross = make([][]float64, maxLag+1)
		f.crossPairs = make([]int64, maxLag+1)
		for i := range f.cross {
			f.cross[i] = make([]float64, pixels*pixels)
		}
	}
	return f
}

// crossStride: the full lag cross-products take every crossStride-th frame
// as the later frame of their pairs, an eighth of the cost (P²·(K+L) per
// frame taken) for estimates that are only slightly noisier.
const crossStride = 8

// exactPixels is the largest frame for which the correlated-stimulus test's
// null mean is computed from the stimulus's full lag covariances (P² per
// lag per frame); larger frames use the separable model alone.
const exactPixels = 144

func (f *frameAutocorr) reset() {
	f.n, f.since = 0, 0
	for _, c := range f.cross {
		clear(c)
	}
	clear(f.crossPairs)
	clear(f.prod)
	clear(f.pairs)
	clear(f.sum)
}

// add folds in the next frame. restart marks a break in time (after a pause
// or a refused frame): products across the break are not taken.
func (f *frameAutocorr) add(frame []float64, restart bool) {
	if restart {
		f.since = 0
	}
	L := int64(len(f.ring))
	copy(f.ring[f.n%L], frame)
	for i, v := range frame {
		f.sum[i] += v
	}
	for tau := int64(0); tau <= int64(f.maxLag) && tau <= f.since; tau++ {
		prev := f.ring[(f.n-tau)%L]
		f.prod[tau] += dot(frame, prev)
		f.pairs[tau]++
		if f.cross != nil && f.n%crossStride == 0 {
			f.crossPairs[tau]++
			c := f.cross[tau]
			for p, v := range frame {
				axpy(c[p*f.pixels:(p+1)*f.pixels], v, prev)
			}
		}
	}
	f.n++
	f.since++
}

// lagModel returns the eigenvalues tau and eigenvectors vecs (L×L, column l
// the l-th) of T₀[i, j] = ρ(i − j), and each lag direction's hat value
// h_l = nτ_lē/(nτ_lē + λ) with ē the mean pixel variance, for n bins.
func (f *frameAutocorr) lagModel(rho []float64, L int, n int64, lambda float64) (tau, vecs, h []float64) {
	t0 := mat.NewSymDense(L, nil)
	for i := 0; i < L; i++ {
		for j := i; j < L; j++ {
			t0.SetSym(i, j, rho[j-i])
		}
	}
	tau, vecs, h = make([]float64, L), make([]float64, L*L), make([]float64, L)
	var eig mat.EigenSym
	if !eig.Factorize(t0, true) {
		return tau, vecs, h
	}
	eig.Values(tau)
	var v mat.Dense
	eig.VectorsTo(&v)
	copy(vecs, v.RawMatrix().Data)
	e := f.variance()
	for l, t := range tau {
		if g := float64(n) * t * e; g > 0 {
			h[l] = g / (g + lambda)
		}
	}
	return tau, vecs, h
}

// variance is the mean pixel variance of the frames so far.
func (f *frameAutocorr) variance() float64 {
	frames := float64(f.pairs[0])
	if frames < 2 {
		return 0
	}
	var mean2 float64
	for _, s := range f.sum {
		mean2 += (s / frames) * (s / frames)
	}
	return (f.prod[0] - frames*mean2) / frames / float64(f.pixels)
}

// rhoTo writes ρ(0…maxLag) into dst (ρ(0) = 1; 0 where not yet known).
func (f *frameAutocorr) rhoTo(dst []float64) {
	clear(dst)
	frames := float64(f.pairs[0])
	if frames < 2 {
		if len(dst) > 0 {
			dst[0] = 1
		}
		return
	}
	var mean2 float64
	for _, s := range f.sum {
		mean2 += (s / frames) * (s / frames)
	}
	c0 := f.prod[0]/frames - mean2
	if !(c0 > 0) {
		dst[0] = 1
		return
	}
	for tau := range dst {
		if tau > f.maxLag || f.pairs[tau] == 0 {
			break
		}
		dst[tau] = (f.prod[tau]/float64(f.pairs[tau]) - mean2) / c0
	}
	dst[0] = 1
}

// SpikeCorrelation is the correction of the correlated-stimulus test for
// the unit's own spike-count autocorrelation: under the null the statistic's
// mean is Mean times and its variance Var times that of independent counts
// of the same variance. Both are 1 for independent counts.
type SpikeCorrelation struct{ Mean, Var float64 }

// spikeCorrelation derives the correction from the counts' autocovariance
// a (A(0…K), sums over bin pairs), the stimulus's temporal autocorrelation
// rho (ρ(0…K+L−1)), the lags L and the shrinkage of each lag direction.
//
// Derivation (see PosteriorTestCorrected). Conditional on the spike train,
// with a stationary stimulus whose lag covariance is separable,
// Cov(s_m, s_{m+τ}) = ρ(τ)γ₀, the centred cross-correlation T = Σ_k ỹ_k x_k
// has covariance V = R_A ⊗ γ₀ with the L×L matrix
// R_A[i, j] = Σ_{|d|≤K} A(d) ρ(d + i − j), while the Gram matrix is
// G ≈ n T₀ ⊗ γ₀, T₀[i, j] = ρ(i − j). Take γ₀ ≈ ē·I for the shrinkage only,
// so the ridge's M = (G + λI)⁻¹ acts on lag direction v_l (T₀ v_l = τ_l v_l)
// as h_l/(nτ_lē) with h_l = nτ_lē/(nτ_lē + λ). With B = Σ_l (h_l/τ_l) v_l v_lᵀ,
// E[TᵀMT] = (P/n)·tr(B R_A) and Var[TᵀMT] = 2(P/n²)·tr((B R_A)²); for
// independent counts R_A = A(0)T₀ and these are (P/n)A(0)Σh_l and
// 2(P/n²)A(0)²Σh_l². The ratios are the correction:
// Mean = tr(B R_A)/(A(0)Σh_l), Var = tr((B R_A)²)/(A(0)²Σh_l²).
func spikeCorrelation(a, rho []float64, L int, h, tau []float64, vecs []float64) SpikeCorrelation {
	one := SpikeCorrelation{1, 1}
	if len(a) == 0 || !(a[0] > 0) {
		return one
	}
	K := len(a) - 1
	at := func(t int) float64 {
		if t < 0 {
			t = -t
		}
		if t >= len(rho) {
			return 0
		}
		return rho[t]
	}
	// R_A, L×L.
	R := make([]float64, L*L)
	for i := 0; i < L; i++ {
		for j := 0; j < L; j++ {
			v := a[0] * at(i-j)
			for d := 1; d <= K; d++ {
				v += a[d] * (at(d+i-j) + at(-d+i-j))
			}
			R[i*L+j] = v
		}
	}
	// B R_A with B = Σ_l (h_l/τ_l) v_l v_lᵀ (vecs column l = v_l).
	BR := make([]float64, L*L)
	var sh, sh2 float64
	for l := 0; l < L; l++ {
		sh += h[l]
		sh2 += h[l] * h[l]
		if !(tau[l] > 0) || h[l] == 0 {
			continue
		}
		f := h[l] / tau[l]
		// v_l (v_lᵀ R)
		for j := 0; j < L; j++ {
			var vr float64
			for i := 0; i < L; i++ {
				vr += vecs[i*L+l] * R[i*L+j]
			}
			for i := 0; i < L; i++ {
				BR[i*L+j] += f * vecs[i*L+l] * vr
			}
		}
	}
	if !(sh > 0) {
		return one
	}
	var tr, tr2 float64
	for i := 0; i < L; i++ {
		tr += BR[i*L+i]
		for j := 0; j < L; j++ {
			tr2 += BR[i*L+j] * BR[j*L+i]
		}
	}
	c := SpikeCorrelation{Mean: tr / (a[0] * sh), Var: tr2 / (a[0] * a[0] * sh2)}
	if !(c.Mean > 0) || !(c.Var > 0) || math.IsInf(c.Mean, 0) || math.IsInf(c.Var, 0) {
		return one
	}
	return c
}

// gammaTo writes γ(τ) = Cov(s_m, s_{m+τ}) (P×P, row-major) for τ ≥ 0;
// false when the full lag covariances are not kept or not yet known.
func (f *frameAutocorr) gammaTo(dst []float64, tau int) bool {
	if f.cross == nil || tau > f.maxLag || f.crossPairs[tau] == 0 || f.pairs[0] < 2 {
		return false
	}
	P := f.pixels
	frames := float64(f.pairs[0])
	inv := 1 / float64(f.crossPairs[tau])
	c := f.cross[tau]
	for p := 0; p < P; p++ {
		for q := 0; q < P; q++ {
			// cross[τ][q, p] = Σ s_m[q] s_{m−τ}[p]: frame m−τ's pixel p, τ later pixel q.
			dst[p*P+q] = c[q*P+p]*inv - (f.sum[p]/frames)*(f.sum[q]/frames)
		}
	}
	return true
}
