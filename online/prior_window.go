package online

import (
	"errors"
	"fmt"
	"math"
	"sync"
	"sync/atomic"
)

// PriorOptions sizes the smooth-local fits. Zero fields take the defaults.
type PriorOptions struct {
	// WindowPixels is the side of the square window of pixels around the
	// field's centre (default 7, at most the frame).
	WindowPixels int
	// WindowLags is the number of lags in the window (default 6, at most
	// the lags kept).
	WindowLags int
	// FirstEvaluations bounds the evidence evaluations of a unit's first
	// fit, coarse grid included (default 40).
	FirstEvaluations int
	// Evaluations bounds the evidence evaluations of every later refit
	// (default 12); a refit that reopens the search (the data grew by a
	// quarter since it last did) adds six probes of the prior's scale.
	Evaluations int
}

// PriorStats is a read-only view of one unit's sufficient statistics over
// the same used bins: the shared centred Gram matrix (through a GramView)
// and the unit's centred cross-correlation and sum of squares.
type PriorStats struct {
	Gram  *GramView
	Cross []float64 // Σ_k (y_k − ȳ) x_k, length D (STA.CrossTo)
	YY    float64   // Σ_k (y_k − ȳ)² (STA.AutocovTo at lag 0)
	// Seed is an estimate in the full layout (the ridge or the STA) whose
	// energy peak places the window; nil keeps the unit's last window.
	Seed []float64
}

// PriorFit is one unit's smooth-local estimate.
type PriorFit struct {
	// Weights is the posterior mean in the full lag-major layout of the
	// ridge (length D), zero outside the window.
	Weights     []float64
	Window      PriorWindow
	Hyper       SmoothLocal // σ² is the evidence-maximising noise variance
	LogEvidence float64     // log evidence at Hyper
	Bins        int         // used bins behind the fit
	Evaluations int         // evidence evaluations of this refit
	Converged   bool        // the compass search met its stopping rule
}

// PriorFitter keeps every unit's smooth-local fit, warm-started from one
// refit to the next. Refit fits one unit from a read-only view of the
// statistics, so a background worker can call it round-robin while the
// owner of the accumulators goes on. A PriorFitter is not safe for
// concurrent use: one goroutine calls it (its scratch is shared by all
// units); the PriorFits it returns are never written afterwards.
type PriorFitter struct {
	width, height, lags int
	opt                 PriorOptions
	units               map[int]*priorUnit
	prob                *priorProblem
	idx                 []int

	// gate, when set, is held for reading during each evidence evaluation,
	// so that an owner closing it pauses the fit within a fraction of an
	// evaluation rather than after the whole refit (see updateGate).
	gate *updateGate
}

// updateGate lets an update pause the background prior fits. Each evidence
// evaluation runs holding it for reading; close announces the update and
// then takes it for writing. An evaluation in progress sees the
// announcement at its next checkpoint (between the steps of forming M and
// between the panels of its Cholesky factorisation), gives up, and is
// redone from its start once the gate is open again: the update waits for
// a piece of an evaluation, not for the whole of one. The results do not
// change, only when they are computed.
type updateGate struct {
	mu      sync.RWMutex
	waiting atomic.Bool
	redone  atomic.Int64 // evaluations paused and redone
}

// close pauses the fits; it returns once none is running.
func (g *updateGate) close() {
	g.waiting.Store(true)
	g.mu.Lock()
}

// open lets the fits go on.
func (g *updateGate) open() {
	g.waiting.Store(false)
	g.mu.Unlock()
}

// priorUnit is one unit's warm state.
type priorUnit struct {
	win        PriorWindow
	peak       [3]float64 // the seed's energy peak (x, y, lag)
	search     *compass
	reopenedAt int // bins when the search was last reopened
	// last is the latest fit without its weights, which are kept for
	// the window only (lastMu, in the order of Window.Indices): a unit's
	// D weights are zero outside its window, and 384 units' full arrays
	// per fitter would take 9 MB.
	last   PriorFit
	lastMu []float64
	fitted bool
}

// NewPriorFitter returns a fitter for frames of width×height pixels and lags
// lags.
func NewPriorFitter(width, height, lags int, opt PriorOptions) (*PriorFitter, error) {
	if width <= 0 || height <= 0 || lags <= 0 {
		return nil, fmt.Errorf("online: NewPriorFitter: frame %d×%d with %d lags", width, height, lags)
	}
	if opt.WindowPixels == 0 {
		opt.WindowPixels = 7
	}
	if opt.WindowLags == 0 {
		opt.WindowLags = 6
	}
	if opt.FirstEvaluations == 0 {
		opt.FirstEvaluations = 40
	}
	if opt.Evaluations == 0 {
		opt.Evaluations = 12
	}
	if opt.WindowPixels < 1 || opt.WindowLags < 1 || opt.FirstEvaluations < 1 || opt.Evaluations < 1 {
		return nil, fmt.Errorf("online: NewPriorFitter: options %+v", opt)
	}
	return &PriorFitter{width: width, height: height, lags: lags, opt: opt, units: make(map[int]*priorUnit)}, nil
}

// guarded runs step while holding the gate for reading (see gate), again
// after each pause until it completes.
func (f *PriorFitter) guarded(step func() error) error {
	if f.gate == nil {
		return step()
	}
	for {
		f.gate.mu.RLock()
		err := step()
		f.gate.mu.RUnlock()
		if !errors.Is(err, errPaused) {
			return err
		}
		f.gate.redone.Add(1)
	}
}

// Last returns the unit's latest fit.
func (f *PriorFitter) Last(unit int) (PriorFit, bool) {
	u, ok := f.units[unit]
	if !ok || !u.fitted {
		return PriorFit{}, false
	}
	fit := u.last
	fit.Weights = make([]float64, f.width*f.height*f.lags)
	for i, a := range fit.Window.Indices(f.width, f.height) {
		fit.Weights[a] = u.lastMu[i]
	}
	return fit, true
}

// Forget drops the unit's state; its next Refit starts cold.
func (f *PriorFitter) Forget(unit int) { delete(f.units, unit) }

// ErrNoWindow is returned by Refit for a unit without a window yet and
// without a seed to place one.
var ErrNoWindow = errors.New("online: smooth-local prior: no window (no seed estimate)")

// Refit fits one unit: it places (or keeps) the window, continues the
// evidence search from the unit's last hyperparameters (the first fit
// starts with a coarse grid), with at most FirstEvaluations or Evaluations
// evidence evaluations, and returns the posterior mean at the best point.
func (f *PriorFitter) Refit(unit int, st PriorStats) (PriorFit, error) {
	v := st.Gram
	if v == nil {
		return PriorFit{}, errors.New("online: smooth-local prior: nil GramView")
	}
	d := f.width * f.height * f.lags
	if v.Pixels() != f.width*f.height || v.Lags() != f.lags {
		return PriorFit{}, fmt.Errorf("online: smooth-local prior: view of %d pixels × %d lags, fitter %d×%d × %d", v.Pixels(), v.Lags(), f.width, f.height, f.lags)
	}
	if len(st.Cross) != d || (st.Seed != nil && len(st.Seed) != d) {
		return PriorFit{}, fmt.Errorf("online: smooth-local prior: cross %d and seed %d values, want %d", len(st.Cross), len(st.Seed), d)
	}
	u := f.units[unit]
	if u == nil {
		if st.Seed == nil {
			return PriorFit{}, ErrNoWindow
		}
		u = &priorUnit{}
		f.units[unit] = u
	}
	moved := false
	if st.Seed != nil {
		win, peak := f.placeWindow(st.Seed)
		moved = u.search != nil && win != u.win
		u.win, u.peak = win, peak
	}
	p := f.problem(u.win)
	if err := f.guarded(func() error { return v.WindowTo(p.gram, f.idx) }); err != nil {
		return PriorFit{}, err
	}
	p.mValid = false // new data
	for i, a := range f.idx {
		p.c[i] = st.Cross[a]
	}
	p.q, p.n = st.YY, v.Bins()

	bestMu := make([]float64, p.k)
	var bestEval evaluation
	lo, hi := thetaBounds(u.win)
	var c *compass
	top := math.Inf(-1) // the best value of this refit, whose mean is in bestMu
	objective := func(t [thetaDim]float64) (float64, bool) {
		var ev evaluation
		err := f.guarded(func() (err error) {
			ev, err = p.evaluate(hyperOf(t), true)
			return err
		})
		if err != nil || math.IsNaN(ev.logEv) {
			return 0, false
		}
		if ev.logEv > top {
			copy(bestMu, p.mu)
			bestEval, top = ev, ev.logEv
		}
		return ev.logEv, true
	}
	evals := 0
	if u.search == nil {
		start, n, ok := f.grid(p, u.peak, objective, lo, hi)
		evals += n
		if !ok {
			return PriorFit{}, errPriorData
		}
		c = newCompass(start.theta)
		c.best = start.value
		u.search = c
		u.reopenedAt = p.n
		evals += c.run(objective, lo, hi, f.opt.FirstEvaluations-evals)
	} else {
		c = u.search
		if moved {
			// The field was placed elsewhere: the envelope follows it, and
			// the search reopens with probes of the scale below.
			for d := range 3 {
				c.theta[4+d] = u.peak[d]
			}
			u.reopenedAt = 0
		}
		for i := range c.theta {
			c.theta[i] = min(max(c.theta[i], lo[i]), hi[i])
		}
		t := c.theta
		c.best = math.Inf(-1)
		val, ok := objective(t)
		evals++
		if !ok {
			return PriorFit{}, errPriorData
		}
		c.best = val
		if p.n >= u.reopenedAt+u.reopenedAt/4 {
			// The data grew by a quarter since the search was last
			// reopened: reopen its steps, and probe a = s/σ² at the six
			// decades of the grid, so that a unit whose first fits found
			// no field (a near its lower bound) can leave that basin.
			c.reopen(1.0 / 4)
			u.reopenedAt = p.n
			evals += f.probeScale(p, c, objective)
		}
		evals += c.run(objective, lo, hi, f.opt.Evaluations-1)
	}
	h := hyperOf(c.theta)
	h.Scale *= bestEval.noise
	h.Noise = bestEval.noise
	fit := PriorFit{
		Weights:     make([]float64, d),
		Window:      u.win,
		Hyper:       h,
		LogEvidence: c.best,
		Bins:        p.n,
		Evaluations: evals,
		Converged:   c.converged(),
	}
	for i, a := range f.idx {
		fit.Weights[a] = bestMu[i]
	}
	u.last, u.fitted = fit, true
	u.last.Weights = nil
	u.lastMu = bestMu // this refit's own
	return fit, nil
}

// problem returns the shared scratch set up for window w, and the window's
// indices in f.idx.
func (f *PriorFitter) problem(w PriorWindow) *priorProblem {
	if f.prob == nil || f.prob.k != w.Size() || f.prob.win.NX != w.NX || f.prob.win.NY != w.NY || f.prob.win.NT != w.NT {
		f.prob = newPriorProblem(w)
	}
	f.prob.win = w
	f.prob.pause = nil
	if f.gate != nil {
		f.prob.pause = &f.gate.waiting
	}
	f.idx = w.Indices(f.width, f.height)
	return f.prob
}

// probeScale evaluates the compass's point with log a at the grid's six
// decades around D_w/tr(G_w) and moves to the best if it is better. It
// returns the evaluations made.
func (f *PriorFitter) probeScale(p *priorProblem, c *compass, obj func([thetaDim]float64) (float64, bool)) int {
	var tr float64
	for i := range p.k {
		tr += p.gram[i*p.k+i]
	}
	if !(tr > 0) {
		return 0
	}
	a0 := float64(p.k) / tr
	n := 0
	base := c.theta
	for e := -2; e <= 3; e++ {
		t := base
		t[0] = math.Log(a0 * math.Pow(10, float64(e)))
		n++
		if v, ok := obj(t); ok && v > c.best {
			c.theta, c.best = t, v
		}
	}
	return n
}

// gridPoint is the best point of the coarse grid.
type gridPoint struct {
	theta [thetaDim]float64
	value float64
}

// grid evaluates the coarse grid of a unit's first fit, the envelope
// centred on the seed's energy peak, temporal length 1 lag and width 1.5
// lags: first a = s/σ² at six decades around D_w/tr(G_w) with spatial
// lengths 1.5 and widths 2 pixels, then, at the best of those a, spatial
// lengths {1, 2.5} times spatial widths {1.5, 3} pixels: ten evaluations.
func (f *PriorFitter) grid(p *priorProblem, centre [3]float64, obj func([thetaDim]float64) (float64, bool), lo, hi [thetaDim]float64) (gridPoint, int, bool) {
	var tr float64
	for i := range p.k {
		tr += p.gram[i*p.k+i]
	}
	if !(tr > 0) {
		return gridPoint{}, 0, false
	}
	a0 := float64(p.k) / tr
	best := gridPoint{value: math.Inf(-1)}
	n, ok := 0, false
	try := func(a, length, width float64) {
		h := SmoothLocal{
			Scale:  a,
			Noise:  1,
			Length: [3]float64{length, length, 1},
			Centre: centre,
			Width:  [3]float64{width, width, 1.5},
		}
		t := thetaOf(h)
		for i := range t {
			t[i] = min(max(t[i], lo[i]), hi[i])
		}
		n++
		if v, good := obj(t); good && v > best.value {
			best, ok = gridPoint{theta: t, value: v}, true
		}
	}
	for e := -2; e <= 3; e++ {
		try(a0*math.Pow(10, float64(e)), 1.5, 2)
	}
	if !ok {
		return best, n, false
	}
	aBest := math.Exp(best.theta[0])
	for _, length := range []float64{1, 2.5} {
		for _, width := range []float64{1.5, 3} {
			try(aBest, length, width)
		}
	}
	return best, n, ok
}

// placeWindow centres the window on the seed's energy peak: the pixel whose
// 3×3 neighbourhood carries the most Σ_lags seed², and the lag with the most
// energy in that neighbourhood. The window starts (NT−1)/3 lags before the
// peak lag, so that the later lags, where fields rebound, stay inside. It
// also returns the peak (x, y, lag).
func (f *PriorFitter) placeWindow(seed []float64) (PriorWindow, [3]float64) {
	W, H, L := f.width, f.height, f.lags
	P := W * H
	nx, ny, nt := min(f.opt.WindowPixels, W), min(f.opt.WindowPixels, H), min(f.opt.WindowLags, L)
	energy := make([]float64, P)
	for t := range L {
		for i, v := range seed[t*P : (t+1)*P] {
			energy[i] += v * v
		}
	}
	box := func(t int, x, y int) float64 {
		var s float64
		for yy := max(y-1, 0); yy <= min(y+1, H-1); yy++ {
			for xx := max(x-1, 0); xx <= min(x+1, W-1); xx++ {
				if t < 0 {
					s += energy[yy*W+xx]
				} else {
					v := seed[t*P+yy*W+xx]
					s += v * v
				}
			}
		}
		return s
	}
	cx, cy, best := W/2, H/2, -1.0
	for y := range H {
		for x := range W {
			if e := box(-1, x, y); e > best {
				cx, cy, best = x, y, e
			}
		}
	}
	peak, bestT := 0, -1.0
	for t := range L {
		if e := box(t, cx, cy); e > bestT {
			peak, bestT = t, e
		}
	}
	clampStart := func(c, n, total int) int { return min(max(c, 0), total-n) }
	return PriorWindow{
		X0: clampStart(cx-nx/2, nx, W),
		Y0: clampStart(cy-ny/2, ny, H),
		T0: clampStart(peak-(nt-1)/3, nt, L),
		NX: nx, NY: ny, NT: nt,
	}, [3]float64{float64(cx), float64(cy), float64(peak)}
}
