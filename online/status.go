package online

import (
	"math"
	"slices"
)

// Status is the plain-language state of one unit's estimate.
type Status string

// The unit states, in the order a unit normally passes through them.
const (
	// Collecting: too few spikes to say anything yet.
	Collecting Status = "collecting"
	// Emerging: the field is significant but not yet reliable.
	Emerging Status = "emerging"
	// Reliable: significant and its split-half reliability has reached the target.
	Reliable Status = "reliable"
	// NoField: enough spikes, and still no significant linear field.
	NoField Status = "no field"
)

// Classify names the state of one unit's estimate:
//
//   - Reliable: significant and reliableReached (R ≥ target);
//   - Emerging: significant, R still below the target;
//   - NoField: not significant with spikes ≥ minSpikes;
//   - Collecting: not significant with fewer than minSpikes spikes.
//
// Significance comes first: a unit that is not significant is never Reliable
// or Emerging, whatever its split-half reliability, and a significant unit
// is never Collecting, however few its spikes.
func Classify(spikes int64, minSpikes int64, significant, reliableReached bool) Status {
	switch {
	case significant && reliableReached:
		return Reliable
	case significant:
		return Emerging
	case spikes >= minSpikes:
		return NoField
	default:
		return Collecting
	}
}

// Summarize condenses the unit summaries into the block summary.
//
//   - Significant counts the Emerging and Reliable units (S), Reliable the
//     Reliable ones.
//   - The block criterion needs k = ceil(fraction·S) of them reliable (at
//     least 1; fraction is clamped to (0, 1]). Ready is true when Reliable ≥ k
//     and S > 0. ETA is 0 when ready, otherwise the k-th smallest unit ETA
//     among the significant units, Reliable units counting 0; it is NaN
//     ("too early") when fewer than k of them have a finite ETA, or S = 0.
//   - CentreX/Y and SpreadX/Y are the mean and the root-mean-square deviation
//     from it (divisor n, so one unit has spread 0) of the Reliable units'
//     finite centres; NaN without such units.
//   - SuggestX/Y is the median of those centres, coordinate by coordinate.
//     Each unit's field is the square box centre ± 2·max(SigmaX, SigmaY)
//     (it covers the 2σ ellipse at any orientation; a non-finite sigma
//     counts 0), and the box fits inside a square centred on the suggestion
//     with side a_u = 2·max(|x_u − SuggestX|, |y_u − SuggestY|) + 4·max(σ).
//     Aperture is the ceil(apertureFraction·n)-th smallest a_u: the smallest
//     square centred on the suggestion that contains that fraction of the
//     boxes whole (apertureFraction clamped to (0, 1], default 0.9 when ≤ 0).
//   - ApertureDeg is the visual angle of the aperture seen face on,
//     2·atan(Aperture·PixelSizeCM/(2·DistanceCM)), when geom is given and
//     valid; NaN otherwise.
func Summarize(units []UnitSummary, target, fraction, apertureFraction float64, geom *Geometry) BlockSummary {
	nan := Float(math.NaN())
	if !(apertureFraction > 0) {
		apertureFraction = 0.9
	}
	apertureFraction = math.Min(apertureFraction, 1)
	out := BlockSummary{
		Units:            len(units),
		Target:           Float(target),
		Fraction:         Float(fraction),
		ETA:              nan,
		CentreX:          nan,
		CentreY:          nan,
		SpreadX:          nan,
		SpreadY:          nan,
		SuggestX:         nan,
		SuggestY:         nan,
		Aperture:         nan,
		ApertureFraction: Float(apertureFraction),
		ApertureDeg:      nan,
	}
	var etas []float64
	var xs, ys, hs []float64
	for i := range units {
		u := &units[i]
		if u.Drift && (u.Status == Reliable || u.Status == Emerging) {
			out.Drifting++
		}
		switch u.Status {
		case Reliable:
			out.Reliable++
			out.Significant++
			etas = append(etas, 0)
			x, y := float64(u.CentreX), float64(u.CentreY)
			if summaryFinite(x) && summaryFinite(y) {
				xs, ys = append(xs, x), append(ys, y)
				hs = append(hs, 2*math.Max(summaryAbs(float64(u.SigmaX)), summaryAbs(float64(u.SigmaY))))
			}
		case Emerging:
			out.Significant++
			e := float64(u.ETA)
			if !summaryFinite(e) || e < 0 {
				e = math.Inf(1)
			}
			etas = append(etas, e)
		}
	}
	if s := out.Significant; s > 0 {
		f := math.Max(math.Min(fraction, 1), 0)
		k := max(int(math.Ceil(f*float64(s)-1e-9)), 1)
		if out.Reliable >= k {
			out.Ready = true
			out.ETA = 0
		} else {
			slices.Sort(etas)
			if e := etas[k-1]; !math.IsInf(e, 1) {
				out.ETA = Float(e)
			}
		}
	}
	if n := len(xs); n > 0 {
		mx, sx := summaryMeanSpread(xs)
		my, sy := summaryMeanSpread(ys)
		out.CentreX, out.CentreY = Float(mx), Float(my)
		out.SpreadX, out.SpreadY = Float(sx), Float(sy)
		cx, cy := summaryMedian(xs), summaryMedian(ys)
		out.SuggestX, out.SuggestY = Float(cx), Float(cy)
		sides := make([]float64, n)
		for i := range xs {
			sides[i] = 2*math.Max(math.Abs(xs[i]-cx), math.Abs(ys[i]-cy)) + 2*hs[i]
		}
		slices.Sort(sides)
		k := max(int(math.Ceil(apertureFraction*float64(n)-1e-9)), 1)
		out.Aperture = Float(sides[k-1])
		if geom != nil && geom.DistanceCM > 0 && geom.PixelSizeCM > 0 {
			a := float64(out.Aperture) * geom.PixelSizeCM
			out.ApertureDeg = Float(2 * math.Atan(a/(2*geom.DistanceCM)) * 180 / math.Pi)
		}
	}
	return out
}

func summaryFinite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

func summaryAbs(v float64) float64 {
	if summaryFinite(v) {
		return math.Abs(v)
	}
	return 0
}

// summaryMeanSpread is the mean and the root-mean-square deviation (divisor n).
func summaryMeanSpread(v []float64) (mean, spread float64) {
	for _, x := range v {
		mean += x
	}
	mean /= float64(len(v))
	for _, x := range v {
		spread += (x - mean) * (x - mean)
	}
	return mean, math.Sqrt(spread / float64(len(v)))
}

// summaryMedian sorts a copy of v and returns its middle value (the mean of the two
// middle values for an even count).
func summaryMedian(v []float64) float64 {
	s := slices.Clone(v)
	slices.Sort(s)
	n := len(s)
	if n%2 == 1 {
		return s[n/2]
	}
	return (s[n/2-1] + s[n/2]) / 2
}
