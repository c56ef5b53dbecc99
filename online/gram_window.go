package online

import (
	"fmt"

	"gonum.org/v1/gonum/blas/blas64"
)

// GramView is a read-only copy of what a LagGram holds at one moment, from
// which any entry of the centred Gram matrix X̃ᵀX̃ can be formed without the
// D×D matrix: the lag cross-products Q_τ(n) (P×D), the first and last
// frames for the exact edge terms, and the mean lagged stimulus. After a
// restarted lag history (LagGram.Restart) it also holds the earlier
// segments' Gram matrix, which the LagGram never writes again (Restart
// makes a new one), so the view shares it. A view never changes after View
// returns it, so any number of goroutines may read it while the LagGram
// goes on accumulating. Its size is P·D + D + 2·L·P floats (6.3 MB at
// 16×16 pixels and 12 lags), and the shared D×D matrix after a restart.
type GramView struct {
	pixels, lags, dim int
	frames            int              // frames of the current segment
	cross             []float64        // P×D: cross[p*D + τ*P + q] = Q_τ(n)[p, q]; nil when the segment has no used bin
	first, last       [][]float64      // first and last lags frames of the segment, in order
	mean              []float64        // mean lagged stimulus over the used bins
	past              blas64.Symmetric // XᵀX over the earlier segments' used bins (Data nil: none)
	pastBins          int
	// A share (Share): every entry times scale, and Bins reports bins.
	scale float64
	bins  int
}

// Share returns a view of the same statistics standing for a subset of
// bins of its bins: every entry of the Gram matrix is scaled by
// bins/Bins(), and Bins reports bins. For a stationary stimulus whose
// subset is spread over the block (the alternating split-half chunks), this
// approximates the subset's own centred Gram matrix, closely for white
// noise, whose Gram matrix is near its expectation N·c²I; it is an
// approximation, not the subset's exact Gram matrix.
func (v *GramView) Share(bins int) *GramView {
	s := *v
	s.scale = float64(bins) / float64(v.allBins())
	s.bins = bins
	return &s
}

// View copies the LagGram's statistics into a GramView. It must be called by
// the goroutine that owns the LagGram; it costs about one pass over P·D
// values (plus the counts of the partial chunk on the two-level route).
//
// A view covers every segment of a restarted lag history: the current
// segment through its lag cross-products and edge frames, the earlier ones
// through their Gram matrix, so its entries are those of XᵀX over all the
// used bins.
func (g *LagGram) View() (*GramView, error) {
	if g.Bins() == 0 {
		return nil, ErrFewFrames
	}
	P, L, d := g.pixels, g.lags, g.dim
	v := &GramView{pixels: P, lags: L, dim: d, frames: g.n, pastBins: g.pastBins}
	if g.past != nil {
		v.past = g.past.RawSymmetric()
	}
	if g.segmentBins() > 0 {
		v.cross = make([]float64, P*d)
		g.crossTo(v.cross)
		v.first = make([][]float64, L)
		v.last = make([][]float64, L)
		for m := range L {
			v.first[m] = append([]float64(nil), g.frame(m)...)
			v.last[m] = append([]float64(nil), g.frame(g.n-L+m)...)
		}
	}
	v.mean = make([]float64, d)
	g.lagSumsTo(v.mean)
	nb := float64(g.Bins())
	for i := range v.mean {
		v.mean[i] /= nb
	}
	return v, nil
}

// Pixels is the number of values per frame.
func (v *GramView) Pixels() int { return v.pixels }

// Lags is the number of lags.
func (v *GramView) Lags() int { return v.lags }

// Dim is Pixels·Lags.
func (v *GramView) Dim() int { return v.dim }

// Bins is the number of used bins behind the view.
func (v *GramView) Bins() int {
	if v.scale != 0 {
		return v.bins
	}
	return v.allBins()
}

// allBins is the number of used bins behind the statistics, of every
// segment.
func (v *GramView) allBins() int { return v.pastBins + v.segmentBins() }

// segmentBins is the number of used bins of the current segment.
func (v *GramView) segmentBins() int { return max(0, v.frames-v.lags+1) }

// Mean returns the mean lagged stimulus over the used bins (length Dim). The
// slice belongs to the view and must not be modified.
func (v *GramView) Mean() []float64 { return v.mean }

// frame returns frame m, which must be among the first or the last lags
// frames.
func (v *GramView) frame(m int) []float64 {
	if m < v.lags {
		return v.first[m]
	}
	return v.last[m-(v.frames-v.lags)]
}

// Entry is element (a, b) of XᵀX (centred: X̃ᵀX̃ = XᵀX − N x̄x̄ᵀ) over the
// used bins, with a and b lag-major indices below Dim. It costs O(Lags).
func (v *GramView) Entry(a, b int, centred bool) float64 {
	var s float64
	if v.cross != nil {
		s = v.segmentEntry(a, b)
	}
	if v.past.Data != nil {
		lo, hi := min(a, b), max(a, b) // the upper triangle holds the entries
		s += v.past.Data[lo*v.past.Stride+hi]
	}
	if centred {
		s -= float64(v.allBins()) * v.mean[a] * v.mean[b]
	}
	if v.scale != 0 {
		s *= v.scale
	}
	return s
}

// segmentEntry is element (a, b) of XᵀX over the current segment's used
// bins, from its lag cross-products and edge frames.
func (v *GramView) segmentEntry(a, b int) float64 {
	P, d, n, L := v.pixels, v.dim, v.frames, v.lags
	i, p := a/P, a%P
	j, q := b/P, b%P
	if j < i {
		i, p, j, q = j, q, i, p
	}
	tau := j - i
	s := v.cross[p*d+tau*P+q]
	// Minus Σ_{m=n−i}^{n−1} s_m[p] s_{m−τ}[q] (bins past the end for lag i).
	for m := n - i; m < n; m++ {
		s -= v.frame(m)[p] * v.frame(m - tau)[q]
	}
	// Minus Q_τ(L−1−i) = Σ_{m=τ}^{L−2−i} s_m[p] s_{m−τ}[q] (frames before the first used bin).
	for m := tau; m <= L-2-i; m++ {
		s -= v.frame(m)[p] * v.frame(m - tau)[q]
	}
	return s
}

// WindowTo writes the centred Gram matrix X̃ᵀX̃ restricted to the lag-major
// indices idx into dst, row-major len(idx)×len(idx), without forming the
// D×D matrix: O(len(idx)²·Lags).
func (v *GramView) WindowTo(dst []float64, idx []int) error {
	k := len(idx)
	if len(dst) != k*k {
		return fmt.Errorf("online: GramView.WindowTo: destination has %d values, want %d", len(dst), k*k)
	}
	for _, a := range idx {
		if a < 0 || a >= v.dim {
			return fmt.Errorf("online: GramView.WindowTo: index %d outside 0…%d", a, v.dim-1)
		}
	}
	for r, a := range idx {
		for c := r; c < k; c++ {
			e := v.Entry(a, idx[c], true)
			dst[r*k+c] = e
			dst[c*k+r] = e
		}
	}
	return nil
}
