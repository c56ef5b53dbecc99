package online

import (
	"errors"
	"fmt"
	"math"
	"slices"

	"gonum.org/v1/gonum/mat"
)

// FeatureFinder computes the Features of estimates of one shape, reusing its
// scratch space between calls. It is not safe for concurrent use.
type FeatureFinder struct {
	// MomentsOnly skips the Gaussian fit and reports the moments, for
	// estimates that are not significant: a fit to noise costs the most and
	// means nothing.
	MomentsOnly bool
	// KeepShape leaves the centre, extent and angle (NaN), Separability
	// (NaN), Spatial and Temporal (nil) out, for a caller that keeps them
	// from an earlier call: only the peak lag, the map and the polarity are
	// computed.
	KeepShape bool
	// Warm, when set, starts the fit from this earlier fit of the same unit
	// instead of from the moments, allows fewer steps and fits only a window
	// of ±(3σ + 2) pixels around the earlier centre: the field moves little
	// between updates. The moments still decide when the fit fails.
	Warm *Features
	// Fitted reports, after FeaturesTo, whether the centre and extent come
	// from the Gaussian fit (false: from the moments, because the fit was
	// skipped, failed or gave an unusable shape).
	Fitted bool

	width, height, lags int
	period              float64
	dpp                 float64 // degrees per pixel, NaN without geometry

	gram    *mat.SymDense // lags × lags, MᵀM
	eig     mat.EigenSym
	v       mat.Dense
	ev      []float64 // eigenvalues of MᵀM, ascending
	sv1     float64   // σ₁ of the last separable call
	pos     []float64 // the map times its polarity
	sorted  []float64
	all     []int32   // every pixel index
	xs, ys  []float64 // each pixel's column and row
	win     []int32   // the pixels the fit uses: all, or winBuf
	winBuf  []int32
	jac     []float64 // pixels × gaussParams
	resid   []float64
	trial   []float64
	expv    []float64 // the last model call's exponentials, per window pixel
	weights []float64

	// energy, when the caller sets it (one value per lag), holds the lag
	// energies Σ est² of the next FeaturesTo's estimate, each added in
	// index order; FeaturesTo then does not sum them again.
	energy []float64
}

// The least-squares 2-D Gaussian: parameters and iteration limits.
const (
	gaussParams   = 7  // amplitude, x0, y0, ln σ1, ln σ2, angle, offset
	gaussMaxIter  = 30 // Levenberg–Marquardt steps at most
	gaussWarmIter = 8  // steps at most from a warm start
	// floorNoiseSD is the noise floor of the moments in robust standard
	// deviations of the map (common practice, no source).
	floorNoiseSD = 3.0
	// madToSD turns a median absolute deviation into a normal standard
	// deviation (1/Φ⁻¹(3/4); a textbook constant).
	madToSD = 1.482602218505602
)

// NewFeatureFinder checks the shape: frames of width×height pixels, lags
// lags, framePeriod seconds per frame; geom may be nil.
func NewFeatureFinder(width, height, lags int, framePeriod float64, geom *Geometry) (*FeatureFinder, error) {
	if width <= 0 || height <= 0 || lags <= 0 {
		return nil, fmt.Errorf("online: features: width %d, height %d and lags %d must be positive", width, height, lags)
	}
	if !(framePeriod > 0) || math.IsInf(framePeriod, 0) {
		return nil, fmt.Errorf("online: features: frame period %v must be positive and finite", framePeriod)
	}
	p := width * height
	f := &FeatureFinder{
		width: width, height: height, lags: lags, period: framePeriod,
		dpp:     math.NaN(),
		gram:    mat.NewSymDense(lags, nil),
		pos:     make([]float64, p),
		sorted:  make([]float64, p),
		jac:     make([]float64, p*gaussParams),
		resid:   make([]float64, p),
		trial:   make([]float64, p),
		expv:    make([]float64, p),
		weights: make([]float64, p),
	}
	if geom != nil {
		f.dpp = geom.DegreesPerPixel()
	}
	f.all = make([]int32, p)
	f.xs, f.ys = make([]float64, p), make([]float64, p)
	for i := range f.all {
		f.all[i] = int32(i)
		f.xs[i], f.ys[i] = float64(i%width), float64(i/width)
	}
	f.winBuf = make([]int32, 0, p)
	return f, nil
}

// FeaturesOf summarises one estimate (STA or ridge weights, lag-major
// [lag][row][column], len width·height·lags). See FeatureFinder.FeaturesTo.
func FeaturesOf(est []float64, width, height, lags int, framePeriod float64, geom *Geometry) (Features, error) {
	f, err := NewFeatureFinder(width, height, lags, framePeriod, geom)
	if err != nil {
		return Features{}, err
	}
	var out Features
	err = f.FeaturesTo(&out, est)
	return out, err
}

// FeaturesTo writes the summary of est into dst, reusing dst's slices when
// they are large enough (pass a fresh Features when the result is shared).
//
//   - PeakLag is the lag with the largest Σ est² over pixels, LatencyMS that
//     lag times the frame period; Map is the spatial map at that lag.
//   - Polarity is the sign of the map's largest-magnitude pixel.
//   - Centre, σ and angle come from a least-squares fit of
//     A·exp(−½[u²/σ1² + v²/σ2²]) + B to Polarity·map (u, v the coordinates
//     along and across the major axis), by Levenberg–Marquardt steps started
//     from the moments of Polarity·map above a noise floor (the smaller of 3
//     robust standard deviations of the map and half its peak). Fitting the
//     signed map rather than |map| keeps the noise zero-mean, so σ is not
//     biased low by the rectified noise of the flanks. When the fit fails,
//     puts the centre outside the frame, or gives σ outside [0.2 pixel,
//     frame size], the moments are reported instead. Coordinates are pixel
//     indices: x the column, y the row; Angle is the major axis from the x
//     axis towards +y, in (−π/2, π/2].
//   - Separability is σ₁²/Σσᵢ² of the pixels×lags matrix M; Spatial = σ₁u₁
//     (height×width) and Temporal = v₁ (unit norm), signs chosen so that
//     Spatial's largest-magnitude pixel has the sign of Polarity.
//
// An estimate that is zero everywhere has Polarity 0 and NaN centre,
// extent and separability.
func (f *FeatureFinder) FeaturesTo(dst *Features, est []float64) error {
	p := f.width * f.height
	f.Fitted = false
	if len(est) != p*f.lags {
		return fmt.Errorf("online: features: estimate has %d values, want %d (%d×%d pixels × %d lags)", len(est), p*f.lags, f.width, f.height, f.lags)
	}
	// The lag energies come first: a value that is not finite makes its
	// lag's energy NaN or +Inf, and only then are the values searched for
	// it (an energy can also overflow from finite values).
	peak, best := 0, -1.0
	finite := true
	for l := range f.lags {
		var e float64
		if len(f.energy) == f.lags {
			e = f.energy[l]
		} else {
			for _, v := range est[l*p : (l+1)*p] {
				e += v * v
			}
		}
		finite = finite && !math.IsNaN(e) && !math.IsInf(e, 0)
		if e > best {
			peak, best = l, e
		}
	}
	if !finite {
		for i, v := range est {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return fmt.Errorf("online: features: estimate value %d is %v", i, v)
			}
		}
	}
	dst.PeakLag = peak
	dst.LatencyMS = Float(float64(peak) * f.period * 1000)
	m := est[peak*p : (peak+1)*p]
	dst.Map = floatsTo(dst.Map, m)
	dst.Polarity = 0
	big := 0.0
	for _, v := range m {
		if math.Abs(v) > math.Abs(big) {
			big = v
		}
	}
	switch {
	case big > 0:
		dst.Polarity = 1
	case big < 0:
		dst.Polarity = -1
	}
	nan := Float(math.NaN())
	dst.CentreX, dst.CentreY, dst.SigmaX, dst.SigmaY, dst.Angle = nan, nan, nan, nan, nan
	dst.Separability = nan
	if f.KeepShape {
		dst.Spatial, dst.Temporal = nil, nil
		f.degrees(dst)
		return nil
	}
	if best == 0 {
		dst.Spatial = floatsTo(dst.Spatial, make([]float64, p))
		dst.Temporal = floatsTo(dst.Temporal, make([]float64, f.lags))
		f.degrees(dst)
		return nil
	}
	g := f.shape(m, float64(dst.Polarity))
	dst.CentreX, dst.CentreY = Float(g.x0), Float(g.y0)
	dst.SigmaX, dst.SigmaY, dst.Angle = Float(g.s1), Float(g.s2), Float(g.angle)
	f.degrees(dst)
	return f.separable(dst, est)
}

func (f *FeatureFinder) degrees(dst *Features) {
	dst.CentreXDeg = Float(float64(dst.CentreX) * f.dpp)
	dst.CentreYDeg = Float(float64(dst.CentreY) * f.dpp)
	dst.SigmaXDeg = Float(float64(dst.SigmaX) * f.dpp)
	dst.SigmaYDeg = Float(float64(dst.SigmaY) * f.dpp)
}

func floatsTo(dst Floats, v []float64) Floats {
	dst = slices.Grow(dst[:0], len(v))
	for _, x := range v {
		dst = append(dst, Float(x))
	}
	return dst
}

// separable fills Separability, Spatial and Temporal from the leading
// singular triple of M (pixels × lags), through the symmetric eigenproblem
// of the small lags × lags matrix MᵀM = V Σ² Vᵀ: v₁ its leading eigenvector,
// σ₁u₁ = M v₁, and Σσᵢ² = ‖M‖_F². This costs pixels·lags² instead of an SVD
// of M; σ₁u₁ and v₁ agree with the SVD's to round-off times σ₁²/(σ₁² − σ₂²).
func (f *FeatureFinder) separable(dst *Features, est []float64) error {
	p, L := f.width*f.height, f.lags
	var total float64
	for a := range L {
		ra := est[a*p : (a+1)*p]
		b := 0
		// Four products at a time in one pass over row a (each summed in
		// index order, as dot sums it).
		for ; b+4 <= a+1; b += 4 {
			r0, r1, r2, r3 := est[b*p:(b+1)*p], est[(b+1)*p:(b+2)*p], est[(b+2)*p:(b+3)*p], est[(b+3)*p:(b+4)*p]
			r0, r1, r2, r3 = r0[:len(ra)], r1[:len(ra)], r2[:len(ra)], r3[:len(ra)]
			var g0, g1, g2, g3 float64
			for i, v := range ra {
				g0 += v * r0[i]
				g1 += v * r1[i]
				g2 += v * r2[i]
				g3 += v * r3[i]
			}
			f.gram.SetSym(a, b, g0)
			f.gram.SetSym(a, b+1, g1)
			f.gram.SetSym(a, b+2, g2)
			f.gram.SetSym(a, b+3, g3)
		}
		for ; b <= a; b++ {
			f.gram.SetSym(a, b, dot(ra, est[b*p:(b+1)*p]))
		}
		total += f.gram.At(a, a)
	}
	if !f.eig.Factorize(f.gram, true) {
		return errors.New("online: features: eigendecomposition failed")
	}
	f.ev = f.eig.Values(f.ev)
	f.eig.VectorsTo(&f.v)
	top := L - 1 // eigenvalues come in ascending order
	f.sv1 = math.Sqrt(math.Max(f.ev[top], 0))
	dst.Separability = Float(math.Min(f.ev[top]/total, 1))
	dst.Spatial = slices.Grow(dst.Spatial[:0], p)
	big := 0.0
	for i := range p {
		var x float64
		for l := range L {
			x += est[l*p+i] * f.v.At(l, top)
		}
		dst.Spatial = append(dst.Spatial, Float(x))
		if math.Abs(x) > math.Abs(big) {
			big = x
		}
	}
	sign := 1.0
	if (big > 0 && dst.Polarity < 0) || (big < 0 && dst.Polarity > 0) {
		sign = -1
	}
	for i := range dst.Spatial {
		dst.Spatial[i] *= Float(sign)
	}
	dst.Temporal = slices.Grow(dst.Temporal[:0], L)
	for l := range L {
		dst.Temporal = append(dst.Temporal, Float(sign*f.v.At(l, top)))
	}
	return nil
}

// gauss is an elliptical Gaussian on the pixel grid.
type gauss struct {
	amp, x0, y0, s1, s2, angle, offset float64
}

// shape returns the centre and extent of polarity·m: the Gaussian fit when
// it is usable, else the thresholded moments.
func (f *FeatureFinder) shape(m []float64, polarity float64) gauss {
	for i, v := range m {
		f.pos[i] = polarity * v
	}
	mom := f.moments(m)
	if f.MomentsOnly {
		return mom
	}
	start, steps := mom, gaussMaxIter
	f.win = f.all
	if w := f.Warm; w != nil && w.SigmaX > 0 && w.SigmaY > 0 {
		start.x0, start.y0 = float64(w.CentreX), float64(w.CentreY)
		start.s1, start.s2, start.angle = float64(w.SigmaX), float64(w.SigmaY), float64(w.Angle)
		steps = gaussWarmIter
		f.window(start)
	}
	fit, ok := f.fit(start, steps)
	if ok && f.usable(fit) {
		f.Fitted = true
		return fit
	}
	return mom
}

// window sets f.win to the pixels within ±(3σ₁ + 2) of g's centre, or to
// the whole frame when that leaves fewer pixels than 4·gaussParams.
func (f *FeatureFinder) window(g gauss) {
	r := 3*g.s1 + 2
	x0, x1 := max(int(math.Floor(g.x0-r)), 0), min(int(math.Ceil(g.x0+r)), f.width-1)
	y0, y1 := max(int(math.Floor(g.y0-r)), 0), min(int(math.Ceil(g.y0+r)), f.height-1)
	if (x1-x0+1)*(y1-y0+1) < 4*gaussParams || (x1-x0+1)*(y1-y0+1) >= len(f.all) {
		return
	}
	w := f.winBuf[:0]
	for y := y0; y <= y1; y++ {
		for x := x0; x <= x1; x++ {
			w = append(w, int32(y*f.width+x))
		}
	}
	f.win = w
}

func (f *FeatureFinder) usable(g gauss) bool {
	w, h := float64(f.width), float64(f.height)
	size := math.Max(w, h)
	for _, v := range []float64{g.amp, g.x0, g.y0, g.s1, g.s2, g.angle, g.offset} {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return false
		}
	}
	return g.amp > 0 &&
		g.x0 >= -0.5 && g.x0 <= w-0.5 && g.y0 >= -0.5 && g.y0 <= h-0.5 &&
		g.s2 >= 0.2 && g.s1 <= size
}

func median(v []float64) float64 {
	slices.Sort(v)
	n := len(v)
	if n%2 == 1 {
		return v[n/2]
	}
	return (v[n/2-1] + v[n/2]) / 2
}

// moments gives the centre and second moments of f.pos above the noise
// floor.
func (f *FeatureFinder) moments(m []float64) gauss {
	copy(f.sorted, m)
	med := median(f.sorted)
	for i, v := range m {
		f.sorted[i] = math.Abs(v - med)
	}
	sd := madToSD * median(f.sorted)
	peak := slices.Max(f.pos)
	floor := math.Min(floorNoiseSD*sd, peak/2)
	var sw, sx, sy float64
	for i, a := range f.pos {
		w := math.Max(a-floor, 0)
		f.weights[i] = w
		sw += w
		sx += w * float64(i%f.width)
		sy += w * float64(i/f.width)
	}
	if sw == 0 { // a flat map: every pixel equal
		for i := range f.weights {
			f.weights[i] = 1
			sx += float64(i % f.width)
			sy += float64(i / f.width)
		}
		sw = float64(len(f.weights))
	}
	x0, y0 := sx/sw, sy/sw
	var cxx, cyy, cxy float64
	for i, w := range f.weights {
		dx, dy := float64(i%f.width)-x0, float64(i/f.width)-y0
		cxx += w * dx * dx
		cyy += w * dy * dy
		cxy += w * dx * dy
	}
	cxx, cyy, cxy = cxx/sw, cyy/sw, cxy/sw
	// Eigenvalues of the 2×2 moment matrix; a single pixel has σ 0, so the
	// moments keep at least the σ of a uniform pixel, 1/√12.
	tr, det := cxx+cyy, cxx*cyy-cxy*cxy
	disc := math.Sqrt(math.Max(tr*tr/4-det, 0))
	const pixelVar = 1.0 / 12
	return gauss{
		amp: peak - floor, x0: x0, y0: y0,
		s1:     math.Sqrt(math.Max(tr/2+disc, pixelVar)),
		s2:     math.Sqrt(math.Max(tr/2-disc, pixelVar)),
		angle:  normAngle(0.5 * math.Atan2(2*cxy, cxx-cyy)),
		offset: floor,
	}
}

func normAngle(a float64) float64 {
	for a > math.Pi/2 {
		a -= math.Pi
	}
	for a <= -math.Pi/2 {
		a += math.Pi
	}
	return a
}

// model evaluates the Gaussian with parameters q at the pixels of f.win
// into out (one value per window pixel), and its Jacobian into f.jac when
// jac is true. It returns the sum of squared residuals against f.pos, and
// keeps each pixel's exponential in f.expv for jacobian.
func (f *FeatureFinder) model(q *[gaussParams]float64, out []float64, jac bool) float64 {
	amp, x0, y0 := q[0], q[1], q[2]
	s1, s2 := math.Exp(q[3]), math.Exp(q[4])
	c, s := math.Cos(q[5]), math.Sin(q[5])
	i1, i2 := 1/(s1*s1), 1/(s2*s2)
	var cost float64
	for k, px := range f.win {
		i := int(px)
		dx, dy := f.xs[i]-x0, f.ys[i]-y0
		u, v := dx*c+dy*s, -dx*s+dy*c
		e := math.Exp(-0.5 * (u*u*i1 + v*v*i2))
		f.expv[k] = e
		h := amp*e + q[6]
		out[k] = h
		r := f.pos[i] - h
		cost += r * r
	}
	if jac {
		f.jacobian(q)
	}
	return cost
}

// jacobian writes the Jacobian of the Gaussian at q into f.jac, from the
// exponentials that the last model call, at the same q, kept.
func (f *FeatureFinder) jacobian(q *[gaussParams]float64) {
	amp, x0, y0 := q[0], q[1], q[2]
	s1, s2 := math.Exp(q[3]), math.Exp(q[4])
	c, s := math.Cos(q[5]), math.Sin(q[5])
	i1, i2 := 1/(s1*s1), 1/(s2*s2)
	for k, px := range f.win {
		i := int(px)
		dx, dy := f.xs[i]-x0, f.ys[i]-y0
		u, v := dx*c+dy*s, -dx*s+dy*c
		e := f.expv[k]
		g := amp * e
		j := f.jac[k*gaussParams : (k+1)*gaussParams]
		// ∂h/∂θ = −½ g ∂Q/∂θ, Q = u²/σ1² + v²/σ2².
		j[0] = e
		j[1] = g * (u*i1*c - v*i2*s)
		j[2] = g * (u*i1*s + v*i2*c)
		j[3] = g * u * u * i1
		j[4] = g * v * v * i2
		j[5] = -g * u * v * (i1 - i2)
		j[6] = 1
	}
}

// fit refines start by Levenberg–Marquardt on f.pos.
func (f *FeatureFinder) fit(start gauss, steps int) (gauss, bool) {
	q := [gaussParams]float64{start.amp, start.x0, start.y0, math.Log(start.s1), math.Log(start.s2), start.angle, start.offset}
	cost := f.model(&q, f.trial, true)
	mu := 1e-3
	var a [gaussParams][gaussParams]float64
	var b, step [gaussParams]float64
	for range steps {
		// Normal equations JᵀJ δ = Jᵀr with Marquardt's scaled damping.
		for r := range gaussParams {
			b[r] = 0
			for c := range gaussParams {
				a[r][c] = 0
			}
		}
		for k, px := range f.win {
			j := f.jac[k*gaussParams : (k+1)*gaussParams]
			res := f.pos[px] - f.trial[k]
			for r := range gaussParams {
				b[r] += j[r] * res
				for c := r; c < gaussParams; c++ {
					a[r][c] += j[r] * j[c]
				}
			}
		}
		improved := false
		for range 10 {
			var damped [gaussParams][gaussParams]float64
			for r := range gaussParams {
				for c := r; c < gaussParams; c++ {
					damped[r][c] = a[r][c]
					damped[c][r] = a[r][c]
				}
				damped[r][r] += mu * math.Max(a[r][r], 1e-12)
			}
			if !solve7(&damped, &b, &step) {
				mu *= 10
				continue
			}
			var next [gaussParams]float64
			for r := range gaussParams {
				next[r] = q[r] + step[r]
			}
			if c := f.model(&next, f.resid, false); c < cost {
				converged := cost-c <= 1e-8*cost
				q, cost = next, c
				mu = math.Max(mu/3, 1e-9)
				improved = true
				if converged || f.hopeless(&q) {
					return f.toGauss(q), true
				}
				break
			}
			mu *= 4
		}
		if !improved {
			break
		}
		// The accepted trial was the last model call: its values and
		// exponentials are those at q, and so is its cost.
		f.trial, f.resid = f.resid, f.trial
		f.jacobian(&q)
	}
	return f.toGauss(q), true
}

// hopeless reports whether the fit has run into a shape that usable
// refuses and that the remaining steps are not expected to leave: narrower
// than a twentieth of a pixel, or centred a whole frame outside. Fits to a
// noisy or non-Gaussian map tend to shrink onto one pixel step by step,
// using every step they are allowed.
func (f *FeatureFinder) hopeless(q *[gaussParams]float64) bool {
	w, h := float64(f.width), float64(f.height)
	return min(q[3], q[4]) < math.Log(0.05) ||
		q[1] < -w || q[1] > 2*w || q[2] < -h || q[2] > 2*h
}

func (f *FeatureFinder) toGauss(q [gaussParams]float64) gauss {
	g := gauss{amp: q[0], x0: q[1], y0: q[2], s1: math.Exp(q[3]), s2: math.Exp(q[4]), angle: q[5], offset: q[6]}
	if g.s2 > g.s1 {
		g.s1, g.s2 = g.s2, g.s1
		g.angle += math.Pi / 2
	}
	g.angle = normAngle(g.angle)
	return g
}

// solve7 solves the symmetric positive definite system a x = b by Cholesky.
func solve7(a *[gaussParams][gaussParams]float64, b, x *[gaussParams]float64) bool {
	var l [gaussParams][gaussParams]float64
	for i := range gaussParams {
		for j := 0; j <= i; j++ {
			s := a[i][j]
			for k := range j {
				s -= l[i][k] * l[j][k]
			}
			if i == j {
				if !(s > 0) {
					return false
				}
				l[i][i] = math.Sqrt(s)
			} else {
				l[i][j] = s / l[j][j]
			}
		}
	}
	var y [gaussParams]float64
	for i := range gaussParams {
		s := b[i]
		for k := range i {
			s -= l[i][k] * y[k]
		}
		y[i] = s / l[i][i]
	}
	for i := gaussParams - 1; i >= 0; i-- {
		s := y[i]
		for k := i + 1; k < gaussParams; k++ {
			s -= l[k][i] * x[k]
		}
		x[i] = s / l[i][i]
	}
	return true
}
