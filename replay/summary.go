package replay

import (
	"fmt"
	"math"
)

// summarize is the one-paragraph prose of a Report: when the trainee
// stopped, when the block rule was met, how well the estimates at the stop
// match the full block's.
func summarize(r *Report) string {
	var when string
	switch {
	case !r.Stopped:
		when = fmt.Sprintf("ran the whole block (%.1f s)", float64(r.BlockS))
	default:
		when = fmt.Sprintf("stopped at %.1f s of %.1f s, saving %.1f s", float64(r.StopS), float64(r.BlockS), float64(r.SavedS))
	}
	rule := "the block rule was never met"
	if !math.IsNaN(float64(r.RuleStopS)) {
		switch lead := float64(r.LeadS); {
		case lead > 0:
			rule = fmt.Sprintf("the block rule was met at %.1f s, %.1f s after the stop", float64(r.RuleStopS), lead)
		case lead < 0:
			rule = fmt.Sprintf("the block rule was met at %.1f s, %.1f s before the stop", float64(r.RuleStopS), -lead)
		default:
			rule = fmt.Sprintf("the block rule was met at %.1f s, at the stop", float64(r.RuleStopS))
		}
	}
	corr := "no unit had an estimate at the stop"
	if r.Overall.Scored > 0 {
		corr = fmt.Sprintf("estimates at the stop correlate %.3f on average (lowest %.3f) with the full block over %d units",
			float64(r.Overall.MeanRidge), float64(r.Overall.MinRidge), r.Overall.Scored)
	}
	return fmt.Sprintf("block %s: %s; %s; %s", r.Block, when, rule, corr)
}
