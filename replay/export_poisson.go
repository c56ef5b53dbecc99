package replay

import (
	"errors"
	"fmt"

	"livefield/online"
)

// PoissonSummary describes a unit's Poisson refinement in units/<name>.json
// (ExportOptions.Poisson): the file of the MAP filter (log-rate per unit of
// stimulus, same layout as the other estimates, zero outside the prior's
// window), the log posterior at it, the Newton steps and whether the
// stopping rule was met (online.PoissonFit); or, for a unit that could not
// be refined, the reason.
type PoissonSummary struct {
	PoissonFile         string       `json:"poisson_file,omitempty"`
	PoissonLogPosterior online.Float `json:"poisson_log_posterior"`
	PoissonIterations   int          `json:"poisson_iterations"`
	PoissonConverged    bool         `json:"poisson_converged"`
	PoissonIntercept    online.Float `json:"poisson_intercept"`
	PoissonError        string       `json:"poisson_error,omitempty"`
}

// PoissonCounts count the outcome of the Poisson refinement of an export.
type PoissonCounts struct {
	Units      int   `json:"units"`       // units with a smooth-local estimate, so tried
	Fitted     int   `json:"fitted"`      // of those, refined
	Converged  int   `json:"converged"`   // of those, meeting the stopping rule
	Failed     int   `json:"failed"`      // tried but not refined (poisson_error says why)
	Bins       int   `json:"bins"`        // used bins kept for the refinement
	StoreBytes int64 `json:"store_bytes"` // memory of the kept bins
}

// binCollector keeps the bins of the exported block in an online.BinStore
// as the feeder's estimator takes them (FeedOptions.OnBin): every block's
// when no block is named (a new block starts a new store, so the last one
// is left), and a fresh store when the block's estimates are reset.
type binCollector struct {
	want   string // the exported block, "" for the last
	block  string
	mapper *online.Mapper
	store  *online.BinStore
	bins   int64    // the mapper's used bins after the last bin
	ids    []string // unit ids by the mapper's index
	err    error    // the first error of this block's store
}

func (c *binCollector) add(block string, m *online.Mapper, frame []float64, counts []online.Count) {
	if c.want != "" && block != c.want {
		return
	}
	if block != c.block || m != c.mapper || m.Bins() < c.bins {
		cfg := m.Config()
		c.block, c.mapper, c.bins, c.ids = block, m, 0, c.ids[:0]
		c.store, c.err = online.NewBinStore(cfg.Width, cfg.Height, cfg.Lags)
	}
	if c.err != nil {
		return
	}
	used := m.Bins() > c.bins
	c.bins = m.Bins()
	for len(c.ids) < m.Units() {
		c.ids = append(c.ids, m.UnitID(len(c.ids)))
	}
	c.err = c.store.Add(frame, counts, used)
}

// refinePoisson fits the Poisson refinement of every unit of final that has
// a smooth-local estimate, from the bins the collector kept for block. A
// unit that cannot be refined gets its reason, never an error of the whole.
func refinePoisson(c *binCollector, final *online.Snapshot, block string, opt ExportOptions) (map[string]online.PoissonFit, map[string]error, PoissonCounts) {
	var n PoissonCounts
	fits, fails := map[string]online.PoissonFit{}, map[string]error{}
	var ids []string
	var units []online.PoissonUnit
	index := map[string]int{}
	for i, id := range c.ids {
		index[id] = i
	}
	var whole error
	switch {
	case c.store == nil || c.block != block:
		whole = fmt.Errorf("no bins were kept for block %q", block)
	case c.err != nil:
		whole = c.err
	}
	for _, u := range final.Units {
		d, ok := final.Detail(u.ID)
		if !ok || d.PriorHyper == nil || d.PriorWindow == nil {
			continue
		}
		n.Units++
		i, known := index[u.ID]
		switch {
		case whole != nil:
			fails[u.ID] = whole
		case !known:
			fails[u.ID] = errors.New("the unit has no bins")
		default:
			ids = append(ids, u.ID)
			units = append(units, online.PoissonUnit{Unit: i, Hyper: *d.PriorHyper, Window: *d.PriorWindow})
		}
	}
	if whole == nil {
		n.Bins, n.StoreBytes = c.store.Bins(), c.store.Bytes()
		if opt.PoissonProgress != nil {
			opt.PoissonProgress(0, len(units))
		}
		res, errs := c.store.PoissonMAPAll(units, online.PoissonOptions{Progress: opt.PoissonProgress})
		for k, id := range ids {
			if errs[k] != nil {
				fails[id] = errs[k]
				continue
			}
			fits[id] = res[k]
			n.Fitted++
			if res[k].Converged {
				n.Converged++
			}
		}
	}
	n.Failed = len(fails)
	return fits, fails, n
}
