package online

import "math"

// Looks at a unit's field. The page re-tests every unit every second and the
// experimenter acts the first time a unit shows a field, so the error rate
// that matters is the share of null units ever called significant during a
// block, not the share at any one moment. A unit's significance is decided
// only at looks on a geometric grid of its information (its spike count):
// look j is taken once the unit has FirstLookSpikes·2^(j−1) spikes, and it
// rejects the null when the fixed-sample p-value of that moment is below
//
//	α_j = α / (j(j + 1)),
//
// an α-spending function over information time (Lan & DeMets 1983) whose
// increments sum to α: Σ_j 1/(j(j+1)) = 1. With each look's p-value
// calibrated, the union (Bonferroni) bound gives
// P(null unit ever significant) ≤ Σ_j α_j ≤ α for a block of any length,
// whatever the look times, which depend on the spike train alone. The bound
// ignores the strong correlation between looks, so it is conservative; the
// price is a stricter level at later looks (α/110 at the 10th look, at
// 12 800 spikes). A look that finds the null rejected stays so for the rest
// of the block; the p-value shown beside it is the fixed-sample one.

// FirstLookSpikes is the spike count of a unit's first look.
const FirstLookSpikes = 25

// LookIndex is the number of looks due at a spike count: j with
// FirstLookSpikes·2^(j−1) ≤ spikes < FirstLookSpikes·2^j (0 before the first).
func LookIndex(spikes float64) int {
	if !(spikes >= FirstLookSpikes) {
		return 0
	}
	return 1 + int(math.Floor(math.Log2(spikes/FirstLookSpikes)+1e-12))
}

// LookSpikes is the spike count at which look j (≥ 1) is due.
func LookSpikes(j int) float64 { return FirstLookSpikes * math.Exp2(float64(j-1)) }

// LookLevel is α_j = α/(j(j+1)), the level of look j ≥ 1.
func LookLevel(alpha float64, j int) float64 { return alpha / float64(j*(j+1)) }

// lookState is one unit's place in the sequence of looks.
type lookState struct {
	look        int     // index of the last look taken (0: none)
	significant bool    // a look has rejected the null
	at          int64   // spikes at the rejecting look
	noField     float64 // cached DetectionSpikes (0: not yet computed)
}

// update takes the look due at spikes, if any, with the fixed-sample
// p-value p, and returns whether the unit is significant. When several looks
// fell due since the last update only the latest is taken (its level is the
// smallest; skipping levels only spends less).
func (s *lookState) update(spikes, p, alpha float64) bool {
	if s.significant {
		return true
	}
	j := LookIndex(spikes)
	if j > s.look {
		s.look = j
		if p < LookLevel(alpha, j) {
			s.significant, s.at = true, int64(spikes)
		}
	}
	return s.significant
}

// persistenceShare and persistenceLooks define when a reliability target
// counts as reached: R ≥ target at this update and at every earlier update
// since the unit had (1 − persistenceShare) of its present spikes, with at
// least persistenceLooks such earlier updates. A noisy R that crosses the
// target once does not make a unit reliable, and the first crossing (biased
// upward by selection) is not what is reported.
const (
	persistenceShare = 0.2
	persistenceLooks = 3
)

// persistentlyAbove reports whether R and the recent history stay at or
// above target in the sense of persistenceShare and persistenceLooks.
func persistentlyAbove(history []HistoryPoint, spikes float64, R, target float64) bool {
	if !(R >= target) {
		return false
	}
	since := (1 - persistenceShare) * spikes
	n := 0
	for i := len(history) - 1; i >= 0; i-- {
		h := history[i]
		if float64(h.Spikes) < since {
			break
		}
		if !(float64(h.Reliability) >= target) {
			return false
		}
		n++
	}
	return n >= persistenceLooks
}
