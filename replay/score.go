package replay

import (
	"math"
	"sort"

	"livefield/online"
)

// Moment is the estimates of a block at one time: a snapshot and its
// arrival time in seconds after the block start. A zero Moment (nil Snap)
// is a moment that never came.
type Moment struct {
	Snap *online.Snapshot
	S    float64
}

// UnitScore compares one unit's estimate at the stop with its estimate at
// the end of the block.
type UnitScore struct {
	ID                string        `json:"id"`
	SpikesAtStop      int64         `json:"spikes_at_stop"`
	SpikesFull        int64         `json:"spikes_full"`
	StatusAtStop      online.Status `json:"status_at_stop"`
	StatusFull        online.Status `json:"status_full"`
	ReliabilityAtStop online.Float  `json:"reliability_at_stop"`
	ReliabilityFull   online.Float  `json:"reliability_full"`
	// Pearson correlation over all lags and pixels of the estimate at the
	// stop with the full-block estimate (null when the unit had no
	// estimate at the stop or either is constant).
	Ridge online.Float `json:"ridge_correlation"`
	STA   online.Float `json:"sta_correlation"`
	// RidgeAtRule is the same at the moment the block rule was first met.
	RidgeAtRule online.Float `json:"ridge_correlation_at_rule"`
}

// Overall sums the unit scores up.
type Overall struct {
	Units          int          `json:"units"`  // units in the full block
	Scored         int          `json:"scored"` // units with a ridge correlation
	MeanRidge      online.Float `json:"mean_ridge_correlation"`
	MinRidge       online.Float `json:"min_ridge_correlation"`
	MeanSTA        online.Float `json:"mean_sta_correlation"`
	MeanRidgeRule  online.Float `json:"mean_ridge_correlation_at_rule"`
	ReliableAtStop int          `json:"reliable_at_stop"`
	ReliableFull   int          `json:"reliable_full"`
}

// Report is the score of one practice. Times are seconds of arrival time
// after the block start.
type Report struct {
	State   string `json:"state"`
	Session string `json:"session,omitempty"`
	Block   string `json:"block"`
	// Stopped is false when the trainee let the block run to its end.
	Stopped       bool         `json:"stopped"`
	StopS         online.Float `json:"stop_s"`
	BlockS        online.Float `json:"block_s"`
	SavedS        online.Float `json:"saved_s"` // BlockS − StopS
	SavedFraction online.Float `json:"saved_fraction"`
	// What the block rule (the summary's ready flag and ETA) said at the
	// stop, and when it was first met during the whole block (null: never).
	ReadyAtStop bool         `json:"ready_at_stop"`
	ETAAtStopS  online.Float `json:"eta_at_stop_s"`
	RuleStopS   online.Float `json:"rule_stop_s"`
	RuleSavedS  online.Float `json:"rule_saved_s"`
	// LeadS is RuleStopS − StopS: positive when the trainee stopped before
	// the rule would have.
	LeadS   online.Float `json:"lead_s"`
	Units   []UnitScore  `json:"units"`
	Overall Overall      `json:"overall"`
	Summary string       `json:"summary"`
}

// Score compares the estimates at the trainee's stop with those at the end
// of the block (full) and at the moment the block rule was first met
// (rule; zero when it never was). A zero stop means the trainee let the
// block run to its end. Score reads the snapshots only; the Report's State
// and Session are left to the caller.
func Score(stop, full, rule Moment) *Report {
	nan := online.Float(math.NaN())
	rep := &Report{Block: full.Snap.Block, BlockS: online.Float(full.S)}
	if stop.Snap == nil {
		stop = full // the decision was to run the whole block
	} else {
		rep.Stopped = true
	}
	rep.StopS = online.Float(stop.S)
	rep.SavedS = online.Float(full.S - stop.S)
	rep.SavedFraction = nan
	if full.S > 0 {
		rep.SavedFraction = online.Float((full.S - stop.S) / full.S)
	}
	rep.ReadyAtStop = stop.Snap.Summary.Ready
	rep.ETAAtStopS = stop.Snap.Summary.ETA
	rep.RuleStopS, rep.RuleSavedS, rep.LeadS = nan, nan, nan
	if rule.Snap != nil {
		rep.RuleStopS = online.Float(rule.S)
		rep.RuleSavedS = online.Float(full.S - rule.S)
		rep.LeadS = online.Float(rule.S - stop.S)
	}
	ids := make([]string, 0, len(full.Snap.Units))
	for _, u := range full.Snap.Units {
		ids = append(ids, u.ID)
	}
	sort.Strings(ids)
	for _, id := range ids {
		fd, _ := full.Snap.Detail(id)
		if fd == nil {
			continue
		}
		u := UnitScore{
			ID: id, SpikesFull: fd.Spikes, StatusFull: fd.Status, ReliabilityFull: fd.Reliability,
			StatusAtStop: online.Collecting, ReliabilityAtStop: nan, Ridge: nan, STA: nan, RidgeAtRule: nan,
		}
		if sd, ok := stop.Snap.Detail(id); ok {
			u.SpikesAtStop, u.StatusAtStop, u.ReliabilityAtStop = sd.Spikes, sd.Status, sd.Reliability
			u.Ridge = online.Float(online.Pearson(sd.Ridge, fd.Ridge))
			u.STA = online.Float(online.Pearson(sd.STA, fd.STA))
		}
		if rule.Snap != nil {
			if rd, ok := rule.Snap.Detail(id); ok {
				u.RidgeAtRule = online.Float(online.Pearson(rd.Ridge, fd.Ridge))
			}
		}
		rep.Units = append(rep.Units, u)
	}
	rep.Overall = overall(rep.Units)
	rep.Summary = summarize(rep)
	return rep
}

// overall sums the unit scores up; means skip undefined correlations.
func overall(units []UnitScore) Overall {
	nan := online.Float(math.NaN())
	o := Overall{Units: len(units), MeanRidge: nan, MinRidge: nan, MeanSTA: nan, MeanRidgeRule: nan}
	var sumR, sumS, sumRule float64
	nS, nRule := 0, 0
	minR := math.Inf(1)
	for _, u := range units {
		if u.StatusAtStop == online.Reliable {
			o.ReliableAtStop++
		}
		if u.StatusFull == online.Reliable {
			o.ReliableFull++
		}
		if v := float64(u.Ridge); !math.IsNaN(v) {
			sumR += v
			o.Scored++
			minR = math.Min(minR, v)
		}
		if v := float64(u.STA); !math.IsNaN(v) {
			sumS += v
			nS++
		}
		if v := float64(u.RidgeAtRule); !math.IsNaN(v) {
			sumRule += v
			nRule++
		}
	}
	if o.Scored > 0 {
		o.MeanRidge, o.MinRidge = online.Float(sumR/float64(o.Scored)), online.Float(minR)
	}
	if nS > 0 {
		o.MeanSTA = online.Float(sumS / float64(nS))
	}
	if nRule > 0 {
		o.MeanRidgeRule = online.Float(sumRule / float64(nRule))
	}
	return o
}
