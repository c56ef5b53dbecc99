package online

import "math"

// The optimiser of the smooth-local prior's hyperparameters: a compass
// (coordinate pattern) search on the profile log evidence (Kolda, Lewis &
// Torczon 2003, "Optimization by direct search", SIAM Review 45(3), §3),
// derivative-free and resumable.
//
// Parameters θ: log a (a = s/σ²), log δ (3), ν (3), log ψ (3), each kept
// within fixed bounds. One sweep polls θ ± h_i e_i for every coordinate i in
// turn and moves to the first point that raises the evidence; a sweep
// without a move halves every step. The search has converged when every
// step is at most its initial value times PriorStepTol. After a sweep that
// moved, one pattern move repeats the sweep's displacement (Hooke & Jeeves
// 1961, J. ACM 8(2)), which follows curved ridges of the evidence. The state (θ, steps,
// position in the sweep) survives between refits, so a refit continues the
// search on the new data with a bounded number of evaluations.

// thetaDim is the number of optimised hyperparameters.
const thetaDim = 10

// Initial steps of the compass search, per coordinate.
var priorSteps = [thetaDim]float64{1, 0.5, 0.5, 0.5, 1, 1, 1, 0.5, 0.5, 0.5}

// PriorStepTol is the stopping rule of the compass search: it has converged
// when every step has shrunk to this fraction of its initial value (1/64:
// 0.016 in log a, log lengths and log widths, 0.016 pixel or lag in the
// centre).
const PriorStepTol = 1.0 / 64

// Bounds of the optimised hyperparameters.
var (
	logLengthBounds = [2]float64{math.Log(0.25), math.Log(64)}
	logWidthBounds  = [2]float64{math.Log(0.25), math.Log(64)}
	logABounds      = [2]float64{-60, 60}
)

// thetaOf maps hyperparameters to the optimiser's coordinates.
func thetaOf(h SmoothLocal) [thetaDim]float64 {
	var t [thetaDim]float64
	t[0] = math.Log(h.Scale / h.Noise)
	for d := range 3 {
		t[1+d] = math.Log(h.Length[d])
		t[4+d] = h.Centre[d]
		t[7+d] = math.Log(h.Width[d])
	}
	return t
}

// hyperOf maps coordinates back, with σ² = 1 (the profile fixes it later).
func hyperOf(t [thetaDim]float64) SmoothLocal {
	h := SmoothLocal{Scale: math.Exp(t[0]), Noise: 1}
	for d := range 3 {
		h.Length[d] = math.Exp(t[1+d])
		h.Centre[d] = t[4+d]
		h.Width[d] = math.Exp(t[7+d])
	}
	return h
}

// thetaBounds returns the lower and upper bounds of θ for a window: the
// centre may sit up to two pixels or lags outside it.
func thetaBounds(w PriorWindow) (lo, hi [thetaDim]float64) {
	lo[0], hi[0] = logABounds[0], logABounds[1]
	off := [3]int{w.X0, w.Y0, w.T0}
	n := [3]int{w.NX, w.NY, w.NT}
	for d := range 3 {
		lo[1+d], hi[1+d] = logLengthBounds[0], logLengthBounds[1]
		lo[4+d], hi[4+d] = float64(off[d])-2, float64(off[d]+n[d])+1
		lo[7+d], hi[7+d] = logWidthBounds[0], logWidthBounds[1]
	}
	return lo, hi
}

// compass is the resumable state of the search.
type compass struct {
	theta [thetaDim]float64
	step  [thetaDim]float64
	best  float64           // profile log evidence at theta on the current data
	pos   int               // next poll: coordinate pos/2, sign by pos%2
	moved bool              // the current sweep has moved
	base  [thetaDim]float64 // theta at the start of the current sweep
}

func newCompass(theta [thetaDim]float64) *compass {
	c := &compass{theta: theta, base: theta, step: priorSteps, best: math.Inf(-1)}
	return c
}

// converged reports whether every step is below the stopping tolerance.
func (c *compass) converged() bool {
	for i, s := range c.step {
		if s > priorSteps[i]*PriorStepTol*1.000001 {
			return false
		}
	}
	return true
}

// reopen sets every step to at least frac of its initial value, to follow
// an optimum that moves as data arrive.
func (c *compass) reopen(frac float64) {
	for i := range c.step {
		c.step[i] = max(c.step[i], priorSteps[i]*frac)
	}
}

// run polls until convergence or until budget evaluations were spent; f
// returns the objective (to be maximised) and whether it is usable. It
// returns the number of evaluations made. c.best must be the value at
// c.theta on the current data.
func (c *compass) run(f func([thetaDim]float64) (float64, bool), lo, hi [thetaDim]float64, budget int) int {
	evals := 0
	for evals < budget && !c.converged() {
		i, sign := c.pos/2, 1.0
		if c.pos%2 == 1 {
			sign = -1
		}
		c.pos++
		trial := c.theta
		trial[i] += sign * c.step[i]
		trial[i] = min(max(trial[i], lo[i]), hi[i])
		if trial[i] != c.theta[i] {
			evals++
			if v, ok := f(trial); ok && v > c.best {
				c.theta, c.best, c.moved = trial, v, true
				// Skip the opposite direction of this coordinate.
				if c.pos%2 == 1 {
					c.pos++
				}
			}
		}
		if c.pos == 2*thetaDim {
			if !c.moved {
				for j := range c.step {
					c.step[j] /= 2
				}
			} else if evals < budget {
				// Pattern move (Hooke & Jeeves 1961): repeat the sweep's
				// displacement once, to travel along curved ridges.
				evals++
				trial := c.theta
				for j := range trial {
					trial[j] = min(max(trial[j]+(c.theta[j]-c.base[j]), lo[j]), hi[j])
				}
				if v, ok := f(trial); ok && v > c.best {
					c.theta, c.best = trial, v
				}
			}
			c.pos, c.moved = 0, false
			c.base = c.theta
		}
	}
	return evals
}
