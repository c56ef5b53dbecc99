package online

import (
	"errors"
	"fmt"
	"math"
	"slices"
	"sync"

	"livefield/online/internal/fastmat"

	"gonum.org/v1/gonum/mat"
)

// STC accumulates the spike-triggered covariance of one unit in a reduced
// space: the whole spatial frame at a few lags chosen by the caller (for
// instance three lags around the population's peak lag), d = pixels·len(lags)
// dimensions.
//
// It keeps Σn, Σn², Σn·x_r and one triangle of Σn·x_r x_rᵀ, updated by a
// rank-one update per bin with spikes. One goroutine may call AddBin and
// Result; an STC is not safe for concurrent use.
type STC struct {
	pixels int
	lags   []int
	dim    int
	need   int // length of the full lagged stimulus AddBin reads

	spikes, spikes2 float64 // Σn, Σn²
	bins            int64
	sum             []float64 // Σ n x_r
	sq              []float64 // dim×dim, upper triangle of Σ n x_r x_rᵀ
	xr              []float64 // scratch: the reduced stimulus of one bin

	// Samples √n·x_r wait in a batch, stored as the columns of a d×stcBatch
	// matrix, and join sq by one rank-k product when the batch is full or
	// sq is read: a matrix product is several times faster than k rank-one
	// updates.
	cols    []float64
	batched int

	errLen error
}

// NewSTC returns an empty accumulator over the given lags (distinct,
// non-negative) of frames of `pixels` values.
func NewSTC(pixels int, lags []int) (*STC, error) {
	if pixels <= 0 || len(lags) == 0 {
		return nil, fmt.Errorf("online: NewSTC: need pixels > 0 and at least one lag, got %d and %v", pixels, lags)
	}
	maxLag := -1
	for i, l := range lags {
		if l < 0 || slices.Contains(lags[:i], l) {
			return nil, fmt.Errorf("online: NewSTC: lags %v must be distinct and non-negative", lags)
		}
		maxLag = max(maxLag, l)
	}
	d := pixels * len(lags)
	need := pixels * (maxLag + 1)
	return &STC{
		pixels: pixels,
		lags:   slices.Clone(lags),
		dim:    d,
		need:   need,
		sum:    make([]float64, d),
		sq:     make([]float64, d*d),
		xr:     make([]float64, d),
		cols:   make([]float64, d*stcBatch),
		errLen: fmt.Errorf("online: STC.AddBin: lagged stimulus must have at least %d values", need),
	}, nil
}

// stcBatch is how many spike-triggered samples wait before they join the
// second moment.
const stcBatch = 128

// stcRows holds the row-major copy of a batch during a fold, shared by all
// STCs so that each keeps one copy of its batch only.
var stcRows = sync.Pool{New: func() any { return new([]float64) }}

// fold adds the waiting samples to sq: sq += Bᵀ B for the batch B (whole
// matrix; the readers use the upper triangle).
func (s *STC) fold() {
	k := s.batched
	if k == 0 {
		return
	}
	buf := stcRows.Get().(*[]float64)
	if cap(*buf) < k*s.dim {
		*buf = make([]float64, stcBatch*s.dim)
	}
	rows := (*buf)[:k*s.dim]
	for i := range s.dim {
		for r, v := range s.cols[i*stcBatch : i*stcBatch+k] {
			rows[r*s.dim+i] = v
		}
	}
	fastmat.MulAdd(s.dim, s.dim, k, 1, s.cols, stcBatch, rows, s.dim, s.sq, s.dim)
	stcRows.Put(buf)
	s.batched = 0
}

// Dim is the dimension of the reduced space, pixels·len(lags).
func (s *STC) Dim() int { return s.dim }

// Spikes is Σn over the bins added.
func (s *STC) Spikes() float64 { return s.spikes }

// Bytes is the memory held by the accumulator, for capping the number of
// units that get STC.
func (s *STC) Bytes() int {
	return 8*(len(s.sum)+len(s.sq)+len(s.xr)+len(s.cols)) + 8*len(s.lags) + 128
}

// Reset forgets all bins and keeps the storage.
func (s *STC) Reset() {
	s.spikes, s.spikes2, s.bins = 0, 0, 0
	s.batched = 0
	clear(s.sum)
	clear(s.sq)
}

var errSTCCount = errors.New("online: STC.AddBin: spike count must be finite and non-negative")

// AddBin adds one bin with n spikes of the unit; x is the full lagged
// stimulus of the bin (lag-major, at least pixels·(max lag + 1) values).
// Bins without spikes may be skipped (n = 0 adds nothing). It does not
// allocate.
func (s *STC) AddBin(x []float64, n float64) error {
	if len(x) < s.need {
		return s.errLen
	}
	if !(n >= 0) || math.IsInf(n, 0) {
		return errSTCCount
	}
	if n == 0 {
		return nil
	}
	p := s.pixels
	for i, l := range s.lags {
		copy(s.xr[i*p:(i+1)*p], x[l*p:(l+1)*p])
	}
	for i, v := range s.xr {
		s.sum[i] += n * v
	}
	r, sn := s.batched, math.Sqrt(n)
	for i, v := range s.xr {
		s.cols[i*stcBatch+r] = sn * v
	}
	s.batched++
	if s.batched == stcBatch {
		s.fold()
	}
	s.spikes += n
	s.spikes2 += n * n
	s.bins++
	return nil
}

// Effective is the effective number of spike-triggered samples (Σn)²/Σn²:
// a bin with two spikes counts its stimulus twice but is one sample.
func (s *STC) Effective() float64 {
	if s.spikes2 == 0 {
		return 0
	}
	return s.spikes * s.spikes / s.spikes2
}

// CovarianceTo writes C = Σ n (x_r − STA)(x_r − STA)ᵀ/(Σn − 1) − c²I into
// dst (an empty dst is sized to Dim), with c² = stimVariance the pixel
// variance of the white stimulus.
func (s *STC) CovarianceTo(dst *mat.SymDense, stimVariance float64) error {
	s.fold()
	if !(stimVariance >= 0) || math.IsInf(stimVariance, 0) {
		return fmt.Errorf("online: STC: stimulus variance %v must be finite and non-negative", stimVariance)
	}
	if s.spikes <= 1 {
		return fmt.Errorf("online: STC: need more than one spike, have %v", s.spikes)
	}
	if dst.IsEmpty() {
		dst.ReuseAsSym(s.dim)
	} else if dst.SymmetricDim() != s.dim {
		return fmt.Errorf("online: STC.CovarianceTo: destination is %d×%d, want %d×%d", dst.SymmetricDim(), dst.SymmetricDim(), s.dim, s.dim)
	}
	raw := dst.RawSymmetric()
	d, N := s.dim, s.spikes
	for i := range d {
		row := raw.Data[i*raw.Stride : i*raw.Stride+d]
		src := s.sq[i*d : i*d+d]
		mi := s.sum[i] / N
		for j := i; j < d; j++ {
			row[j] = (src[j] - N*mi*(s.sum[j]/N)) / (N - 1)
		}
		row[i] -= stimVariance
	}
	return nil
}

// TWQuantile99 is the 0.99 quantile of the Tracy–Widom law of order 1
// (Johnstone 2001, Table 1: 2.0234), used for the finite-sample margin of
// the Marchenko–Pastur edges.
const TWQuantile99 = 2.0234

// MarchenkoPastur returns bounds on the eigenvalues of C (sample covariance
// minus c²I) for `samples` independent spike-triggered samples of white
// noise of variance c² in d dimensions, when spikes do not depend on the
// stimulus.
//
// The asymptotic support is c²(1 ± √(d/N))² − c² (Marčenko & Pastur 1967).
// For finite N the extreme eigenvalues fluctuate about the edges on the
// Tracy–Widom scale (Johnstone 2001), so each bound moves `tw` Tracy–Widom
// units outwards, with the centring and scaling of Ma (2012) for a Wishart
// matrix of n = N − 1 degrees of freedom (one is spent on the mean):
// with a = √(n − ½), b = √(d − ½), the largest eigenvalue of nS/c² is about
// (a + b)² + tw·(a + b)(1/a + 1/b)^{1/3} and, when d < n, the smallest
// (a − b)² − tw·(a − b)(1/b − 1/a)^{1/3}. With d ≥ n the smallest
// eigenvalues of S are 0, so low is −c².
func MarchenkoPastur(d int, samples, variance, tw float64) (low, high float64) {
	n := samples - 1
	if d <= 0 || !(n > 1) {
		return math.NaN(), math.NaN()
	}
	a, b := math.Sqrt(n-0.5), math.Sqrt(float64(d)-0.5)
	if d == 1 {
		b = 1 // the ½ shift is meant for d ≥ 2
	}
	up := (a+b)*(a+b) + tw*(a+b)*math.Cbrt(1/a+1/b)
	high = variance*up/n - variance
	low = -variance
	if float64(d) < n {
		dn := (a-b)*(a-b) - tw*(a-b)*math.Cbrt(1/b-1/a)
		low = variance*max(dn, 0)/n - variance
	}
	return low, high
}

// Result decomposes C and reports its eigenvalues (descending), the null
// bounds and the significant eigenvectors as filters (excitatory, largest
// first, then suppressive, most negative first).
//
// With low and high both NaN the bounds are MarchenkoPastur(Dim,
// Effective(), stimVariance, TWQuantile99); otherwise the caller's bounds
// are used, for instance quantiles of the extreme eigenvalues of STCs fed
// with circularly shifted spike trains (Rust et al. 2005; Schwartz, Pillow,
// Rust & Simoncelli 2006). Each filter's sign is chosen so that its
// largest-magnitude coefficient is positive.
func (s *STC) Result(stimVariance, low, high float64) (STCResult, error) {
	var c mat.SymDense
	if err := s.CovarianceTo(&c, stimVariance); err != nil {
		return STCResult{}, err
	}
	if math.IsNaN(low) && math.IsNaN(high) {
		low, high = MarchenkoPastur(s.dim, s.Effective(), stimVariance, TWQuantile99)
	} else if !(low <= high) {
		return STCResult{}, fmt.Errorf("online: STC.Result: null bounds [%v, %v] are not ordered", low, high)
	}
	// The eigenvalues alone cost a fraction of the eigenvectors (about a
	// seventh at d = 256): find them first, and decompose again with the
	// vectors only when some eigenvalue leaves the null bounds.
	var eig mat.EigenSym
	if !eig.Factorize(&c, false) {
		return STCResult{}, errors.New("online: STC: eigendecomposition failed")
	}
	vals := eig.Values(nil) // ascending
	var vecs mat.Dense
	if d := s.dim; vals[d-1] > high || vals[0] < low {
		if !eig.Factorize(&c, true) {
			return STCResult{}, errors.New("online: STC: eigendecomposition failed")
		}
		vals = eig.Values(vals)
		eig.VectorsTo(&vecs)
	}
	d := s.dim
	res := STCResult{
		Lags:        slices.Clone(s.lags),
		Eigenvalues: make(Floats, d),
		NullLow:     Float(low),
		NullHigh:    Float(high),
		Spikes:      int64(math.Round(s.spikes)),
	}
	for i := range d {
		res.Eigenvalues[i] = Float(vals[d-1-i])
	}
	add := func(k int) {
		f := make(Floats, d)
		big := 0.0
		for i := range d {
			v := vecs.At(i, k)
			if math.Abs(v) > math.Abs(big) {
				big = v
			}
		}
		sign := 1.0
		if big < 0 {
			sign = -1
		}
		for i := range d {
			f[i] = Float(sign * vecs.At(i, k))
		}
		res.Filters = append(res.Filters, f)
		res.Significant = append(res.Significant, Float(vals[k]))
	}
	for k := d - 1; k >= 0 && vals[k] > high; k-- {
		add(k)
	}
	for k := 0; k < d && vals[k] < low; k++ {
		add(k)
	}
	return res, nil
}

// ShuffleBounds turns the extreme eigenvalues of STCs computed with
// circularly shifted spike trains into null bounds: the `level` quantile
// of the largest eigenvalues and the 1−level quantile of the smallest
// (level in (0.5, 1), e.g. 0.99; empirical quantiles by linear
// interpolation).
func ShuffleBounds(largest, smallest []float64, level float64) (low, high float64, err error) {
	if len(largest) == 0 || len(largest) != len(smallest) {
		return 0, 0, fmt.Errorf("online: ShuffleBounds: need equal, non-zero numbers of extremes, got %d and %d", len(largest), len(smallest))
	}
	if !(level > 0.5 && level < 1) {
		return 0, 0, fmt.Errorf("online: ShuffleBounds: level %v must be in (0.5, 1)", level)
	}
	return quantile(smallest, 1-level), quantile(largest, level), nil
}

func quantile(v []float64, q float64) float64 {
	s := slices.Clone(v)
	slices.Sort(s)
	pos := q * float64(len(s)-1)
	i := int(pos)
	if i >= len(s)-1 {
		return s[len(s)-1]
	}
	f := pos - float64(i)
	return s[i]*(1-f) + s[i+1]*f
}
