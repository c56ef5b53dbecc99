package online

import (
	"fmt"
	"math"
	"runtime"
	"sync"
)

// PoissonUnit names one unit to refine: its index in the block (the counts'
// Count.Unit) and its smooth-local fit's hyperparameters and window
// (PriorFit, UnitDetail.PriorHyper and PriorWindow).
type PoissonUnit struct {
	Unit   int
	Hyper  SmoothLocal
	Window PriorWindow
}

// PoissonMAP refines one unit's smooth-local estimate with the Poisson
// likelihood (poisson_map.go): the maximum a posteriori filter of the
// exponential LNP model under the unit's smooth-local prior, over the
// store's used bins, in the unit's window. It runs on the calling goroutine.
// A unit without spikes, a window outside the frame or a prior that does
// not factor gives an error.
func (s *BinStore) PoissonMAP(u PoissonUnit, opt PoissonOptions) (PoissonFit, error) {
	return s.poissonMAP(u, opt, nil)
}

func (s *BinStore) poissonMAP(u PoissonUnit, opt PoissonOptions, sv *poissonSolver) (PoissonFit, error) {
	w := u.Window
	if w.NX < 1 || w.NY < 1 || w.NT < 1 || w.X0 < 0 || w.Y0 < 0 || w.T0 < 0 ||
		w.X0+w.NX > s.width || w.Y0+w.NY > s.height || w.T0+w.NT > s.lags {
		return PoissonFit{}, fmt.Errorf("online: Poisson refinement: window %+v outside %d×%d × %d lags", w, s.width, s.height, s.lags)
	}
	uc := s.units[u.Unit]
	if uc == nil || !(uc.sum > 0) || s.Bins() < 2 {
		return PoissonFit{}, errPoissonData
	}
	design := s.windowDesign(w)
	k := design.dim()
	p := &poissonData{design: design, xy: make([]float64, k), sy: uc.sum, logFac: uc.logFac}
	row := make([]float64, k)
	for i, b := range uc.bins {
		design.rowsTo(row, int(b), 1)
		for j, v := range row {
			p.xy[j] += uc.at(i) * v
		}
	}
	mean := uc.sum / float64(s.Bins())
	r, err := priorFactor(u.Hyper, w, 1/(mean*mean))
	if err != nil {
		return PoissonFit{}, err
	}
	if sv == nil || sv.k != k {
		sv = newPoissonSolver(k)
	}
	sv.setFactor(r)
	res, err := sv.solve(p, opt)
	if err != nil {
		return PoissonFit{}, err
	}
	fit := PoissonFit{
		Weights: make([]float64, s.pixels*s.lags), Window: w, Intercept: res.theta[0],
		LogPosterior: res.logPosterior, Iterations: res.iterations, Converged: res.converged, Bins: s.Bins(),
	}
	for i, a := range w.Indices(s.width, s.height) {
		fit.Weights[a] = res.w[i]
	}
	return fit, nil
}

// priorFactor returns R = √(s·scale) · E^½ K^½ (k×k, row-major), a factor of
// the smooth-local prior covariance C = s·E^½ K E^½ of h in window w times
// scale (prior.go).
func priorFactor(h SmoothLocal, w PriorWindow, scale float64) ([]float64, error) {
	if !(h.Scale > 0) || math.IsInf(h.Scale, 0) || !(scale > 0) || math.IsInf(scale, 0) {
		return nil, fmt.Errorf("online: Poisson refinement: prior scale %g × %g", h.Scale, scale)
	}
	for d := range 3 {
		if !(h.Length[d] > 0) || !(h.Width[d] > 0) || math.IsNaN(h.Centre[d]) || math.IsInf(h.Centre[d], 0) {
			return nil, fmt.Errorf("online: Poisson refinement: length %v, width %v, centre %v", h.Length, h.Width, h.Centre)
		}
	}
	p := &priorProblem{win: w, k: w.Size(), sqE: make([]float64, w.Size())}
	sizes := [3]int{w.NX, w.NY, w.NT}
	for d, n := range sizes {
		p.root[d] = make([]float64, n*n)
		if err := p.kernelRoot(d, n, h.Length[d]); err != nil {
			return nil, err
		}
	}
	p.envelope(h)
	k := p.k
	root := math.Sqrt(h.Scale * scale)
	r := make([]float64, k*k)
	rx, ry, rt := p.root[0], p.root[1], p.root[2]
	for i := range k {
		xi, yi, ti := i%w.NX, (i/w.NX)%w.NY, i/(w.NX*w.NY)
		si := root * p.sqE[i]
		for j := range k {
			xj, yj, tj := j%w.NX, (j/w.NX)%w.NY, j/(w.NX*w.NY)
			r[i*k+j] = si * rx[xi*w.NX+xj] * ry[yi*w.NY+yj] * rt[ti*w.NT+tj]
		}
	}
	return r, nil
}

// safePoissonMAP is poissonMAP with a panic of the numerics (none is known)
// turned into the unit's error, so that one unit cannot end an export.
func (s *BinStore) safePoissonMAP(u PoissonUnit, opt PoissonOptions, sv *poissonSolver) (fit PoissonFit, err error) {
	defer func() {
		if r := recover(); r != nil {
			fit, err = PoissonFit{}, fmt.Errorf("online: Poisson refinement of unit %d failed: %v", u.Unit, r)
		}
	}()
	return s.poissonMAP(u, opt, sv)
}

// PoissonMAPAll refines every unit of units, opt.Workers at a time, each
// worker with its own scratch. fits[i] and errs[i] belong to units[i]; a
// unit that cannot be fitted has its error and a zero fit.
func (s *BinStore) PoissonMAPAll(units []PoissonUnit, opt PoissonOptions) (fits []PoissonFit, errs []error) {
	fits, errs = make([]PoissonFit, len(units)), make([]error, len(units))
	workers := opt.Workers
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	var mu sync.Mutex
	next, done := 0, 0
	var wg sync.WaitGroup
	for range min(workers, len(units)) {
		wg.Go(func() {
			var sv *poissonSolver
			for {
				mu.Lock()
				i := next
				next++
				mu.Unlock()
				if i >= len(units) {
					return
				}
				if k := units[i].Window.Size(); k > 0 && (sv == nil || sv.k != k) {
					sv = newPoissonSolver(k)
				}
				fits[i], errs[i] = s.safePoissonMAP(units[i], opt, sv)
				mu.Lock()
				done++
				if opt.Progress != nil {
					opt.Progress(done, len(units))
				}
				mu.Unlock()
			}
		})
	}
	wg.Wait()
	return fits, errs
}
