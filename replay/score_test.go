package replay

import (
	"math"
	"strings"
	"testing"
	"time"
)

// TestScore calls the pure scoring function on the end of the twin-half
// block. An estimate compared with itself correlates 1 (Pearson of a
// vector with itself); the times and savings follow from the moments
// given; a zero stop means the whole block ran, a zero rule that it was
// never met.
func TestScore(t *testing.T) {
	_, p, _, _ := runPractice(t, time.Hour) // never stopped
	full := p.full
	if full.Snap == nil || full.S != twinEnd {
		t.Fatalf("the block end was not kept: %+v", full)
	}
	cases := []struct {
		name        string
		stop, rule  Moment
		stopped     bool
		stopS, lead float64 // NaN: undefined
		says        string
	}{
		{"ran to the end, rule never met", Moment{}, Moment{}, false, twinEnd, math.NaN(), "the block rule was never met"},
		{"stopped at 20 s, rule at 25 s", Moment{full.Snap, 20}, Moment{full.Snap, 25}, true, 20, 5, "5.0 s after the stop"},
		{"stopped at 30 s, rule at 25 s", Moment{full.Snap, 30}, Moment{full.Snap, 25}, true, 30, -5, "5.0 s before the stop"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			rep := Score(c.stop, full, c.rule)
			if rep.Stopped != c.stopped || float64(rep.StopS) != c.stopS || float64(rep.SavedS) != twinEnd-c.stopS || rep.Block != "T1" {
				t.Errorf("stopped %v at %v saving %v in block %q; want %v at %v saving %v in T1", rep.Stopped, rep.StopS, rep.SavedS, rep.Block, c.stopped, c.stopS, twinEnd-c.stopS)
			}
			if lead := float64(rep.LeadS); math.IsNaN(lead) != math.IsNaN(c.lead) || (!math.IsNaN(c.lead) && lead != c.lead) {
				t.Errorf("lead %v, want %v", lead, c.lead)
			}
			if !strings.Contains(rep.Summary, c.says) {
				t.Errorf("summary %q lacks %q", rep.Summary, c.says)
			}
			for _, u := range rep.Units {
				if !math.IsNaN(float64(u.Ridge)) && !near(float64(u.Ridge), 1, 1e-12) {
					t.Errorf("unit %s: ridge correlation with itself %v", u.ID, u.Ridge)
				}
			}
			if o := rep.Overall; o.Scored == 0 || !near(float64(o.MeanRidge), 1, 1e-12) || o.Units != 3 {
				t.Errorf("overall %+v", o)
			}
		})
	}
}
