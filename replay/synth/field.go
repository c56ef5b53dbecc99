package synth

import "math"

// The spatial and temporal profiles the model cells are built from. All
// filters are lag-major [lag][row][col]; pixel (row r, column c) sits at
// x = c, y = r, and lag k is the frame shown k bins before the current one,
// at delay τ = k·FramePeriod.

// gabor is a spatial Gabor function (Jones & Palmer 1987): a Gaussian
// envelope of standard deviations sx (along the preferred orientation's
// carrier) and sy, times a cosine carrier of wavelength lambda across the
// orientation theta (radians from the x axis); at gives its phase.
type gabor struct {
	cx, cy, sx, sy, theta, lambda float64
}

func (g gabor) at(x, y, phase float64) float64 {
	dx, dy := x-g.cx, y-g.cy
	c, s := math.Cos(g.theta), math.Sin(g.theta)
	u := dx*c + dy*s  // across the bars (carrier direction)
	v := -dx*s + dy*c // along the bars
	env := math.Exp(-u*u/(2*g.sx*g.sx) - v*v/(2*g.sy*g.sy))
	return env * math.Cos(2*math.Pi*u/g.lambda+phase)
}

// dog is a difference of Gaussians (Rodieck 1965; Enroth-Cugell & Robson
// 1966): a centre of standard deviation sc minus a surround of standard
// deviation ss with relative weight k, each Gaussian normalised to unit
// volume.
type dog struct {
	cx, cy, sc, ss, k float64
}

func (d dog) at(x, y float64) float64 {
	r2 := (x-d.cx)*(x-d.cx) + (y-d.cy)*(y-d.cy)
	c := math.Exp(-r2/(2*d.sc*d.sc)) / (2 * math.Pi * d.sc * d.sc)
	s := math.Exp(-r2/(2*d.ss*d.ss)) / (2 * math.Pi * d.ss * d.ss)
	return c - d.k*s
}

// temporal is a biphasic impulse response: a positive Gaussian lobe at the
// latency followed by a weaker negative rebound, as in the responses of
// cortical simple cells to brief flashes. latency and width are in seconds.
func temporal(tau, latency, width float64) float64 {
	a := (tau - latency) / width
	b := (tau - 1.8*latency) / (1.6 * width)
	return math.Exp(-a*a/2) - 0.3*math.Exp(-b*b/2)
}

// peakLag is the lag of the largest |h| over the lags.
func peakLag(lags int, period, latency, width float64) int {
	best, arg := -1.0, 0
	for k := range lags {
		if v := math.Abs(temporal(float64(k)*period, latency, width)); v > best {
			best, arg = v, k
		}
	}
	return arg
}

// normalise scales w to unit Euclidean norm (leaves an all-zero w alone).
func normalise(w []float64) {
	var ss float64
	for _, v := range w {
		ss += v * v
	}
	if ss == 0 {
		return
	}
	inv := 1 / math.Sqrt(ss)
	for i := range w {
		w[i] *= inv
	}
}

// orthogonalise removes from b its projection on the unit vector a and
// normalises b, so that the two responses are uncorrelated under white noise.
func orthogonalise(b, a []float64) {
	var dot float64
	for i := range a {
		dot += a[i] * b[i]
	}
	for i := range b {
		b[i] -= dot * a[i]
	}
	normalise(b)
}
