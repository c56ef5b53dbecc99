package online

import (
	"math"

	"gonum.org/v1/gonum/stat/distuv"
)

// DefaultSmallestField is the default Config.SmallestField: the variance of
// the smallest field's linear drive, 0.04 (a log firing rate modulated with
// standard deviation 0.2 by the stimulus).
const DefaultSmallestField = 0.04

// DetectionPower is the share of power the "no field" rule asks for.
const DetectionPower = 0.9

// The power rule. "No field" is a claim that a field would have been seen:
// it is said only once the unit has as many spikes as it takes to detect
// the smallest field of interest with probability DetectionPower at the
// level the look schedule then applies; before that a unit without a
// significant field is still "collecting".
//
// The smallest field. For an LNP unit with exponential nonlinearity,
// rate ∝ exp(k·x), and a Gaussian stimulus of covariance Γ, the STA is Γk
// (Bussgang; Paninski 2004), so the whitened STA energy STAᵀΓ⁻¹STA equals
// e = kᵀΓk = Var(k·x), the variance of the linear drive. Config.SmallestField
// states e; it does not depend on the stimulus, the dimension or the frame
// rate.
//
// Non-centrality. With N spikes the centred cross-correlation has mean
// N·STA; its noise covariance is σ²G with σ² = A(0)/n the per-bin count
// variance (ESTIMATION.md's null), so without shrinkage
// δ = (N·STA)ᵀ(σ²G)⁻¹(N·STA) ≈ N²·e/A(0) = N·e·(N/A(0)), where N/A(0) is 1
// for Poisson counts and smaller for bursts (several spikes in one bin carry
// less information). Counts autocorrelated beyond one bin divide δ by the
// correction's Mean. Under the field Q/g is then non-central
// χ²_ν(δ/g), with the null's g and ν taken at full dimension (h_i = 1: what
// the test tends to as bins accrue, and the hardest case), and the power
// at look j is P(χ²_ν(δ/g) > χ²_ν quantile at 1 − α_j).

// NoncentralChiSquareTail is P(χ²_ν(δ) > x), the upper tail of the
// non-central chi-square, from its Poisson mixture of central chi-squares
// Σ_k Pois(k; δ/2)·P(χ²_{ν+2k} > x) (Johnson, Kotz & Balakrishnan,
// Continuous Univariate Distributions vol. 2, ch. 29), summed over the
// Poisson weights within 12 standard deviations of δ/2.
func NoncentralChiSquareTail(x, nu, delta float64) float64 {
	if !(nu > 0) || !(delta >= 0) || math.IsNaN(x) {
		return math.NaN()
	}
	if x <= 0 {
		return 1
	}
	if delta == 0 {
		return distuv.ChiSquared{K: nu}.Survival(x)
	}
	m := delta / 2
	sd := math.Sqrt(m)
	lo := int(math.Max(0, math.Floor(m-12*sd-5)))
	hi := int(math.Ceil(m + 12*sd + 5))
	var s float64
	for k := lo; k <= hi; k++ {
		lg, _ := math.Lgamma(float64(k) + 1)
		w := math.Exp(float64(k)*math.Log(m) - m - lg)
		if w == 0 {
			continue
		}
		s += w * distuv.ChiSquared{K: nu + 2*float64(k)}.Survival(x)
	}
	return math.Min(s, 1)
}

// fieldPower is the probability that look j detects a field of drive
// variance e when the unit has N spikes, for a test whose null is
// g·χ²_ν and whose non-centrality per spike is perSpike·e/g. The
// non-central tail is Patnaik's (1949) two-moment approximation,
// χ²_ν(δ) ≈ r·χ²_f with r = (ν + 2δ)/(ν + δ) and f = (ν + δ)²/(ν + 2δ),
// which is within 0.01 of the exact power over the range the rule uses
// (TestFieldPowerPatnaik) at a fraction of the cost of the Poisson mixture.
func fieldPower(alpha float64, j int, nu, g, perSpike, e, N float64) float64 {
	crit := distuv.ChiSquared{K: nu}.Quantile(1 - LookLevel(alpha, j))
	delta := N * perSpike * e / g
	r := (nu + 2*delta) / (nu + delta)
	f := (nu + delta) * (nu + delta) / (nu + 2*delta)
	return distuv.ChiSquared{K: f}.Survival(crit / r)
}

// maxLooks bounds the search for the detecting look (2^40 spikes).
const maxLooks = 40

// DetectionSpikes is the spike count of the first look at which a field of
// drive variance e would be detected with probability DetectionPower, for a
// test of dimension D whose null correction is corr and whose counts give
// perSpike = N/A(0) (1 for Poisson counts). +Inf when no look within 2^40
// spikes would.
func DetectionSpikes(alpha, e float64, D int, corr SpikeCorrelation, perSpike float64) float64 {
	if !(e > 0) || D <= 0 || !(perSpike > 0) {
		return math.Inf(1)
	}
	// Full dimension: t1 = t2 = D.
	mean := corr.Mean * float64(D)
	g := corr.Var * float64(D) / mean
	nu := mean * mean / (corr.Var * float64(D))
	per := perSpike / corr.Mean
	for j := 1; j <= maxLooks; j++ {
		N := LookSpikes(j)
		if fieldPower(alpha, j, nu, g, per, e, N) >= DetectionPower {
			return N
		}
	}
	return math.Inf(1)
}
