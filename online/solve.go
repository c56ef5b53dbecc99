package online

import (
	"fmt"
	"time"

	"gonum.org/v1/gonum/mat"
)

// The routes by which Update folds the bins added since the last update.
const (
	RouteNone     = "none"     // no new bins
	RouteWoodbury = "woodbury" // block RLS update over the logged rows
	RouteResolve  = "resolve"  // Cholesky re-solve from the sufficient statistics
)

// SolveInfo says how the latest Update folded its bins into the ridge.
type SolveInfo struct {
	Route   string  `json:"route"`   // RouteNone, RouteWoodbury or RouteResolve
	Bins    int64   `json:"bins"`    // bins folded by this update
	Seconds float64 `json:"seconds"` // wall time of the fold
	// Error is set when the re-solve failed (statistics that are not finite
	// or a Gram that lost definiteness): the ridge then starts again empty.
	Error string `json:"error,omitempty"`
}

// The cost model that picks the route. Rates were measured on the reference
// machine class (2-core x86 with AVX2+FMA, both cores): the fastmat kernel
// runs the block update's products at 33–36 GFLOP/s (BenchmarkMulAdd and
// BenchmarkRidgeFlush); the whole re-solve (the blocked Cholesky and
// inverse on the same kernel, fastmat.InvertSPD, D³ flops together, with
// the Gram and the weights) at about 14 GFLOP/s counted as D³ over its time
// (BenchmarkRidgeAnchor: 2.1 s at D = 3072 with the AVX2 kernel, 1.5 s with
// AVX-512). A machine
// with other rates picks a route that is slower than it could be, never a
// wrong result: both routes are exact.
const (
	kernelFlops  = 33e9
	resolveFlops = 14e9
)

// woodburySeconds is the predicted time of the block update over b rows at
// dimension d: about 3·d²·b flops.
func woodburySeconds(d, b int) float64 {
	return 3 * float64(d) * float64(d) * float64(b) / kernelFlops
}

// resolveSeconds is the predicted time of a re-solve at dimension d with
// cols response columns: d³ for the factorisation and the inverse, 2·d²·cols
// for the weights.
func resolveSeconds(d, cols int) float64 {
	fd := float64(d)
	return fd*fd*fd/resolveFlops + 2*fd*fd*float64(cols)/kernelFlops
}

// maxLogBytes bounds the memory of the bin log (frames and counts).
const maxLogBytes = 64 << 20

// logLimit is the break-even number of bins beyond which a re-solve is
// cheaper than the block update (for the columns of capUnits units),
// bounded by maxLogBytes.
func (m *Mapper) logLimit() int {
	d := m.dim
	be := int(resolveSeconds(d, m.columns(m.capUnits))/woodburySeconds(d, 1)) + 1
	perBin := 8*m.pixels + 64 // a frame and a few counts
	return max(1, min(be, maxLogBytes/perBin))
}

// flushRows is how many logged rows go into one block update; it bounds the
// ridge's scratch memory.
const flushRows = 240

// fold brings the ridge up to every bin added so far, by the cheaper exact
// route, and records which ran.
func (m *Mapper) fold() {
	start := time.Now()
	pending := m.used - m.folded
	route, msg := RouteNone, ""
	switch {
	case pending == 0:
	case m.forceRoute == RouteResolve || (m.forceRoute == "" && m.resolveCheaper(int(pending))) || m.log.dropped:
		route = RouteResolve
		if err := m.resolve(); err != nil {
			msg = err.Error()
		}
	default:
		route = RouteWoodbury
		m.replayLog()
	}
	m.folded = m.used
	m.log.limit = m.logLimit()
	m.log.start(m.ringHistory())
	m.solve = SolveInfo{Route: route, Bins: pending, Seconds: time.Since(start).Seconds(), Error: msg}
}

func (m *Mapper) resolveCheaper(bins int) bool {
	return resolveSeconds(m.dim, m.ridge.Cols()) < woodburySeconds(m.dim, bins)
}

// ringHistory returns the last min(Lags−1, added) frames, oldest first.
func (m *Mapper) ringHistory() [][]float64 {
	n := int(min(int64(m.cfg.Lags-1), m.added))
	h := m.hist[:0]
	for i := n - 1; i >= 0; i-- {
		h = append(h, m.ring[(m.head-i+len(m.ring))%len(m.ring)])
	}
	m.hist = h
	return h
}

// replayLog folds the logged bins by block updates of flushRows rows.
func (m *Mapper) replayLog() {
	for k := range m.log.bins() {
		counts, halfA := m.log.rowTo(m.x, k)
		if halfA {
			m.yrow[0] = 1
		}
		for _, c := range counts {
			m.yrow[m.colY(c.Unit)] += c.N
			if halfA {
				m.yrow[m.colA(c.Unit)] += c.N
			}
		}
		m.ridge.AddRow(m.x, m.yrow)
		if m.ridge.Pending() >= flushRows {
			m.ridge.Flush()
		}
		m.yrow[0] = 0
		for _, c := range counts {
			m.yrow[m.colY(c.Unit)] = 0
			m.yrow[m.colA(c.Unit)] = 0
		}
	}
	m.ridge.Flush()
}

// resolve re-anchors the ridge on the sufficient statistics of every used
// bin: the lag Gram, the STA sums, and the per-column Σy and yᵀy.
func (m *Mapper) resolve() error {
	d, n := m.dim, m.dim+1
	cols := m.ridge.Cols()
	cross := make([]float64, cols*n)
	yy := make([]float64, cols)
	s := m.sta
	s.Flush() // the cross sums are read below
	// colTo writes [Σ y x; Σ y] for unit u: both halves, or half A only.
	colTo := func(dst []float64, u int, onlyA bool) {
		if u >= s.units {
			return // no spike yet: zero
		}
		a, b := s.block(u, staA), s.block(u, staB)
		if onlyA {
			copy(dst, a)
			dst[d] = s.sy[u][0]
			return
		}
		for i := range d {
			dst[i] = a[i] + b[i]
		}
		dst[d] = s.sy[u][0] + s.sy[u][1]
	}
	for u := range m.ids {
		colTo(cross[m.colY(u)*n:(m.colY(u)+1)*n], u, false)
		yy[m.colY(u)] = m.yy[u]
		colTo(cross[m.colA(u)*n:(m.colA(u)+1)*n], u, true)
		yy[m.colA(u)] = m.yyA[u]
	}
	// The half indicator: Σ h x = Σx over half A, Σ h = hᵀh = bins in A.
	copy(cross[:d], s.sumX[0])
	cross[d] = float64(m.usedA)
	yy[0] = float64(m.usedA)
	sumX := make([]float64, d)
	m.gram.lagSumsTo(sumX)
	if bins := int64(m.gram.Bins()); bins != m.used {
		return fmt.Errorf("online: re-solve: the Gram holds %d bins, the mapper %d", bins, m.used)
	}
	return m.ridge.Anchor(m.used, func(dst *mat.SymDense) error { return m.gram.GramTo(dst, false) }, sumX, cross, yy)
}
