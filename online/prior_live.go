package online

import (
	"math"
	"runtime"
	"sync"

	"livefield/online/internal/fastmat"
)

// The smooth-local estimate, live. After every Update the mapper hands a
// read-only copy of the statistics (a GramView of the lag cross-products
// and, for every significant unit, its STA, ridge, split-half STAs and
// sums of squares) to a background worker through a latest-wins slot. The
// worker refits the units round-robin, warm-started (PriorFitter keeps each
// unit's window and hyperparameters), those never fitted first and among
// them the emerging ones, and publishes each unit's fit; the next Update
// puts the latest fits into its snapshot. Update never waits for a fit.
// With Config.PriorInline the fits run inside Update instead, a fixed
// number per update, so that tests and replays are reproducible.
//
// Each fit is three: the whole block, and each split half on its own data
// (its own cross-correlation, sum of squares, window placed on its own STA,
// and its own hyperparameters), so that nothing chosen on the whole block
// leaks between the halves. The halves' Gram matrices are approximated by
// the whole block's scaled by each half's share of the bins (GramView.Share):
// close for white noise, whose Gram matrix is near N·c²I, an approximation
// for other stationary stimuli. The Spearman–Brown corrected correlation of
// the two halves' estimates, times the share of the filter's energy inside
// the window (windowShare), is the prior's reliability.

// Live defaults of the fitter (Config.Prior): fewer evaluations per refit
// than the library's defaults, so that each unit is refitted every few
// seconds at hundreds of units; the warm start carries the search on. With
// 4 per refit of the whole block (2 per half), a round over 384 units at
// the reference frame takes about 12 s on one worker after two minutes of
// data and 8.5 s after ten (BenchmarkPriorRound); TestMapperPriorLive's
// checks pass at the demo's scale.
const (
	priorLiveEvaluations = 4
	priorLiveFirst       = 20
)

// PriorInlineAll as Config.PriorInline fits every significant unit inside
// every Update.
const PriorInlineAll = -1

// The names of the estimates a unit's status can come from
// (UnitSummary.Estimate).
const (
	EstimateRidge = "ridge"
	EstimatePrior = "prior"
)

// priorJob is the read-only statistics of one Update for the prior fits.
type priorJob struct {
	epoch        int64 // the mapper's Reset count
	seq          int64 // the update count
	view         *GramView
	usedA, usedB int
	units        []priorInput
}

// priorInput is one significant unit's statistics in a priorJob. STA and
// Ridge are shared with the snapshot, which never writes them; the halves
// belong to the job.
type priorInput struct {
	unit             int
	emerging         bool
	spikes           float64 // over used bins
	sta, ridge       Floats
	yy               float64 // Σ(y − ȳ)²
	halfA, halfB     []float64
	spikesA, spikesB float64
	yyA, yyB         float64 // Σ(y − ȳ_h)² within each half
}

// priorResult is one unit's latest smooth-local estimate.
type priorResult struct {
	epoch       int64
	seq         int64 // of the job it was fitted on
	weights     Floats
	hyper       SmoothLocal
	window      PriorWindow
	logEv       float64
	bins        int
	spikes      float64
	reliability float64 // Spearman–Brown corrected split half times the window's share; NaN without it
	split       float64 // the Spearman–Brown corrected split half alone
}

// priorRunner fits the units of jobs round-robin with warm starts. It is
// used by one goroutine at a time.
type priorRunner struct {
	width, height, lags int
	opt                 PriorOptions
	epoch               int64
	fitters             [3]*PriorFitter // whole block, half A, half B
	fittedOn            map[int]int64   // unit → seq of the job of its last fit
	lastTurn            map[int]int64   // unit → turn of its last fit
	turn                int64
	cross, seed         []float64
	part, parts         int         // fits the units u with u mod parts = part
	gate                *updateGate // passed to the fitters (see priorWorker.gate)
}

func newPriorRunner(cfg Config) *priorRunner {
	d := cfg.Width * cfg.Height * cfg.Lags
	r := &priorRunner{width: cfg.Width, height: cfg.Height, lags: cfg.Lags, opt: cfg.Prior,
		cross: make([]float64, d), seed: make([]float64, d), parts: 1}
	r.reset(0)
	return r
}

// reset forgets every unit's warm state.
func (r *priorRunner) reset(epoch int64) {
	r.epoch = epoch
	for i := range r.fitters {
		opt := r.opt
		if i > 0 {
			// The halves carry on their searches with half the budget
			// per refit: their fits only decide the reliability, and a
			// unit's turn costs the less (BenchmarkPriorRound).
			opt.Evaluations = max(2, opt.Evaluations/2)
		}
		// The config was checked by NewMapper, so this cannot fail.
		r.fitters[i], _ = NewPriorFitter(r.width, r.height, r.lags, opt)
		r.fitters[i].gate = r.gate
	}
	r.fittedOn = map[int]int64{}
	r.lastTurn = map[int]int64{}
}

// pick returns the index in job.units of the next unit to fit, or −1 when
// every unit was fitted on this job: the unit whose last fit is the oldest
// (never fitted first), and among those never fitted the emerging ones.
func (r *priorRunner) pick(job *priorJob) int {
	if job.epoch != r.epoch {
		r.reset(job.epoch)
	}
	best, bestTurn, bestEmerging := -1, int64(0), false
	for i, in := range job.units {
		if in.unit%r.parts != r.part {
			continue
		}
		if s, ok := r.fittedOn[in.unit]; ok && s >= job.seq {
			continue
		}
		t, ok := r.lastTurn[in.unit]
		if !ok {
			t = -1
		}
		if best < 0 || t < bestTurn || (t == bestTurn && in.emerging && !bestEmerging) {
			best, bestTurn, bestEmerging = i, t, in.emerging
		}
	}
	return best
}

// fit refits unit job.units[i] on the whole block and on each half. ok is
// false when the whole block's fit failed (too little data).
func (r *priorRunner) fit(job *priorJob, i int) (priorResult, bool) {
	in := &job.units[i]
	r.fittedOn[in.unit] = job.seq
	r.lastTurn[in.unit] = r.turn
	r.turn++
	for j, v := range in.sta {
		r.cross[j] = float64(v) * in.spikes
	}
	for j, v := range in.ridge {
		r.seed[j] = float64(v)
	}
	fit, err := r.fitters[0].Refit(in.unit, PriorStats{Gram: job.view, Cross: r.cross, YY: in.yy, Seed: r.seed})
	if err != nil {
		return priorResult{}, false
	}
	res := priorResult{epoch: job.epoch, seq: job.seq, weights: FloatsOf(fit.Weights), hyper: fit.Hyper, window: fit.Window,
		logEv: fit.LogEvidence, bins: fit.Bins, spikes: in.spikes, reliability: math.NaN(), split: math.NaN()}
	var halves [2][]float64
	for h, half := range [2][]float64{in.halfA, in.halfB} {
		spikes := [2]float64{in.spikesA, in.spikesB}[h]
		bins := [2]int{job.usedA, job.usedB}[h]
		if spikes == 0 || bins < 3 {
			return res, true
		}
		for j, v := range half {
			r.cross[j] = v * spikes
		}
		yy := [2]float64{in.yyA, in.yyB}[h]
		f, err := r.fitters[1+h].Refit(in.unit, PriorStats{Gram: job.view.Share(bins), Cross: r.cross, YY: yy, Seed: half})
		if err != nil {
			return res, true
		}
		halves[h] = f.Weights
	}
	_, R := SplitHalf(halves[0], halves[1])
	res.split = R
	res.reliability = R * windowShare(in.halfA, in.halfB, fit.Window, r.width, r.height, r.lags)
	return res, true
}

// shareMargin is how far, in pixels and lags, windowShare looks beyond the
// window for the filter's energy: fields are local (the prior's premise),
// and the coefficients farther away add only noise to the estimate.
const shareMargin = 3

// windowShare estimates the share of the filter's energy inside the
// window, ‖w_win‖²/‖w‖², from the two independent split-half STAs a and b:
// for white noise each is the filter times a constant plus independent
// noise, so E[a_i b_i] ∝ w_i², and Σ_win a_i b_i / Σ_box a_i b_i estimates
// the share, the box being the window grown by shareMargin on every side
// (clipped to the frame and lags). Clamped to [0, 1]; 0 when the halves
// show no common signal.
//
// The split-half reliability of the prior estimate is the squared
// correlation of the estimate with its own expectation (classical test
// theory), and that expectation is the filter cut to the window, whose
// correlation with the whole filter is √share. The reliability the status
// uses is therefore R·share, whose square root is the correlation with the
// true filter. (The envelope's own share of the prior's expected energy
// inside the window was tried instead: smooth, but its symmetric Gaussian
// in time puts energy before the window's first lag that fields do not
// have, and it held units back; the whole frame as the box made the
// estimate too noisy.) For a correlated stimulus the STA is the filter
// smeared by the stimulus correlations and the share is a rougher guide.
func windowShare(a, b []float64, w PriorWindow, width, height, lags int) float64 {
	grow := func(lo, n, total int) (int, int) {
		l := max(lo-shareMargin, 0)
		return l, min(lo+n+shareMargin, total) - l
	}
	var box PriorWindow
	box.X0, box.NX = grow(w.X0, w.NX, width)
	box.Y0, box.NY = grow(w.Y0, w.NY, height)
	box.T0, box.NT = grow(w.T0, w.NT, lags)
	var in, all float64
	for _, i := range box.Indices(width, height) {
		all += a[i] * b[i]
	}
	for _, i := range w.Indices(width, height) {
		in += a[i] * b[i]
	}
	if !(all > 0) {
		return 0
	}
	return min(max(in/all, 0), 1)
}

// priorWorker runs priorRunners, each on its own goroutine and with its
// share of the units, over the latest job.
type priorWorker struct {
	// gate is held for reading by each evidence evaluation of a fit and
	// closed by Update, so that fits never run beside an update and an
	// update waits for a piece of one evaluation at most.
	gate    updateGate
	mu      sync.Mutex
	job     *priorJob           // the latest job (latest wins)
	idle    int                 // goroutines that have fitted all their units of job
	results map[int]priorResult // the latest fit per unit
	wake    []chan struct{}     // per goroutine
	stop    chan struct{}
	wg      sync.WaitGroup
}

func startPriorWorker(cfg Config) *priorWorker {
	n := cfg.PriorWorkers
	w := &priorWorker{results: map[int]priorResult{}, stop: make(chan struct{})}
	for k := range n {
		r := newPriorRunner(cfg)
		r.part, r.parts = k, n
		r.gate = &w.gate
		for _, f := range r.fitters {
			f.gate = r.gate
		}
		wake := make(chan struct{}, 1)
		w.wake = append(w.wake, wake)
		w.wg.Go(func() { w.loop(r, wake) })
	}
	return w
}

// priorJobMaxAge is how many updates a job may serve a busy worker before
// the next update offers a fresh one anyway (so that a unit that has just
// turned significant waits a few seconds at most).
const priorJobMaxAge = 5

// wants reports whether an update at seq in the given epoch should build a
// job and offer it: none yet, another epoch, every goroutine done with the
// current one, or the current one priorJobMaxAge updates old. Building a
// job (a copy of the Gram view, each unit's half-STAs) takes a share of
// the update, and a worker still busy with a round would not look at it.
func (w *priorWorker) wants(seq, epoch int64) bool {
	w.mu.Lock()
	defer w.mu.Unlock()
	return w.job == nil || w.job.epoch != epoch || w.idle >= len(w.wake) || seq-w.job.seq >= priorJobMaxAge
}

// offer replaces the job in the slot and wakes the worker.
func (w *priorWorker) offer(job *priorJob) {
	w.mu.Lock()
	w.job, w.idle = job, 0
	w.mu.Unlock()
	for _, wake := range w.wake {
		select {
		case wake <- struct{}{}:
		default:
		}
	}
}

// collect copies the results published since seen into dst.
func (w *priorWorker) collect(dst map[int]priorResult) {
	w.mu.Lock()
	defer w.mu.Unlock()
	for u, r := range w.results {
		if old, ok := dst[u]; !ok || old.seq != r.seq || old.epoch != r.epoch {
			dst[u] = r
		}
	}
}

func (w *priorWorker) loop(runner *priorRunner, wake chan struct{}) {
	// The last job this goroutine finished, by its epoch and sequence
	// (not a pointer, which would keep its Gram view and split-half STAs
	// alive after the slot moved on).
	doneEpoch, doneSeq := int64(-1), int64(-1)
	for {
		select {
		case <-w.stop:
			return
		default:
		}
		w.mu.Lock()
		job := w.job
		w.mu.Unlock()
		i := -1
		if job != nil {
			i = runner.pick(job)
		}
		if i < 0 {
			if job != nil && (job.epoch != doneEpoch || job.seq != doneSeq) {
				doneEpoch, doneSeq = job.epoch, job.seq
				w.mu.Lock()
				if w.job == job {
					w.idle++
				}
				w.mu.Unlock()
			}
			select {
			case <-w.stop:
				return
			case <-wake:
			}
			continue
		}
		res, ok := runner.fit(job, i)
		if ok {
			w.mu.Lock()
			if job.epoch == runner.epoch {
				w.results[job.units[i].unit] = res
			}
			w.mu.Unlock()
		}
	}
}

// close stops the worker and waits for it (at most one unit's fit per
// goroutine).
func (w *priorWorker) close() {
	close(w.stop)
	w.wg.Wait()
}

// priorState is the mapper's side of the live prior.
type priorState struct {
	inline  *priorRunner
	all     []*priorRunner // PriorInlineAll's runners, one per core
	worker  *priorWorker
	closed  bool
	epoch   int64
	results map[int]priorResult // the latest fit per unit, this epoch
	seen    map[int]int64       // unit → seq of the result last added to its trend
	trends  map[int]*Trend
}

// Close stops the background prior fits and waits for the worker to finish
// the fit in hand. The estimates stay readable, later Updates carry the
// last prior fits unchanged. Close may be called more than once.
func (m *Mapper) Close() {
	if w := m.prior.worker; w != nil {
		w.close()
		w.collect(m.prior.results)
		m.prior.worker = nil
	}
	m.prior.closed = true
}

// resetPrior forgets every prior fit (Reset).
func (m *Mapper) resetPrior() {
	m.prior.epoch++
	m.prior.results = map[int]priorResult{}
	m.prior.seen = map[int]int64{}
	m.prior.trends = map[int]*Trend{}
}

// livePrior hands this update's statistics to the prior fits (or runs
// Config.PriorInline fits itself), collects the fits published so far and
// puts them into the details: the prior estimate, its reliability and
// projected time, and the unit's status from the better of the two
// calibrated estimates.
func (m *Mapper) livePrior(details []*UnitDetail) {
	ps := &m.prior
	if ps.results == nil {
		m.resetPrior()
	}
	nan := Float(math.NaN())
	for _, d := range details {
		d.PriorLogEvidence, d.PriorReliability, d.PriorETA = nan, nan, nan
		if d.Status == Emerging || d.Status == Reliable {
			d.Estimate = EstimateRidge
		}
	}
	if m.cfg.NoPrior {
		return
	}
	if !ps.closed {
		n := m.cfg.PriorInline
		var job *priorJob
		// A busy worker with a recent job gets no new one this time.
		if n != 0 || ps.worker == nil || ps.worker.wants(m.updates, ps.epoch) {
			job = m.priorJob(details)
		}
		if job != nil {
			switch {
			case n < 0:
				m.priorInlineAll(job)
			case n > 0:
				if ps.inline == nil {
					ps.inline = newPriorRunner(m.cfg)
				}
				for range n {
					i := ps.inline.pick(job)
					if i < 0 {
						break
					}
					if res, ok := ps.inline.fit(job, i); ok {
						ps.results[job.units[i].unit] = res
					}
				}
			default:
				if ps.worker == nil {
					ps.worker = startPriorWorker(m.cfg)
				}
				ps.worker.offer(job)
			}
		}
		if ps.worker != nil {
			ps.worker.collect(ps.results)
		}
	}
	for u, d := range details {
		res, ok := ps.results[u]
		if !ok || res.epoch != ps.epoch {
			continue
		}
		m.applyPrior(u, d, res)
	}
}

// priorInlineAll fits every unit of job before it returns, on all cores:
// runner k takes the units u with u mod runners = k, so that each unit's
// warm state stays with one runner and the results do not depend on which
// goroutine ran first.
func (m *Mapper) priorInlineAll(job *priorJob) {
	ps := &m.prior
	if k := max(1, runtime.GOMAXPROCS(0)); len(ps.all) != k {
		ps.all = make([]*priorRunner, k)
		for i := range k {
			ps.all[i] = newPriorRunner(m.cfg)
			ps.all[i].part, ps.all[i].parts = i, k
		}
	}
	type fitted struct {
		unit int
		res  priorResult
	}
	out := make([][]fitted, len(ps.all))
	var wg sync.WaitGroup
	for k, r := range ps.all {
		wg.Go(func() {
			for {
				i := r.pick(job)
				if i < 0 {
					return
				}
				if res, ok := r.fit(job, i); ok {
					out[k] = append(out[k], fitted{job.units[i].unit, res})
				}
			}
		})
	}
	wg.Wait()
	for _, fs := range out {
		for _, f := range fs {
			ps.results[f.unit] = f.res
		}
	}
}

// applyPrior puts unit u's latest prior fit into its detail.
func (m *Mapper) applyPrior(u int, d *UnitDetail, res priorResult) {
	ps := &m.prior
	h, win := res.hyper, res.window
	d.Prior = res.weights
	d.PriorHyper = &h
	d.PriorWindow = &win
	d.PriorLogEvidence = Float(res.logEv)
	d.PriorBins = int64(res.bins)
	d.PriorReliability = Float(res.reliability)
	tr := ps.trends[u]
	if tr == nil {
		tr = NewTrend(trendPoints)
		ps.trends[u] = tr
	}
	if s, ok := ps.seen[u]; (!ok || s != res.seq) && !math.IsNaN(res.reliability) {
		tr.Add(res.spikes, res.reliability)
		ps.seen[u] = res.seq
	}
	significant := d.Status == Emerging || d.Status == Reliable
	if !significant {
		return
	}
	if eta, ok := tr.Project(float64(d.Rate), m.cfg.Target); ok {
		d.PriorETA = Float(eta)
	}
	// The status comes from the more reliable estimate: both
	// reliabilities are calibrated against the true filter
	// (TestMapperPriorLive).
	pr, rr := res.reliability, float64(d.Reliability)
	if !(pr > rr) && !math.IsNaN(rr) {
		return
	}
	if math.IsNaN(pr) {
		return
	}
	d.Estimate = EstimatePrior
	if pr >= m.cfg.Target {
		d.Status = Reliable
		d.ETA = 0
	} else if !math.IsNaN(float64(d.PriorETA)) {
		d.ETA = d.PriorETA
	}
}

// priorStartP is the fixed-sample p-value below which a unit not yet
// significant is fitted by the prior already (common practice, no source:
// a screening level well above the block's α).
const priorStartP = 0.01

// priorJob gathers the statistics of the significant units for the prior
// fits, or returns nil when there is none or the Gram view does not cover
// the same bins as the unit sums (which never happens: the view covers
// every segment of a restarted lag history, as the sums do).
func (m *Mapper) priorJob(details []*UnitDetail) *priorJob {
	var units []int
	for u, d := range details {
		// A unit is fitted from its first look with p < priorStartP, before
		// the significance rule (spent over the block's looks) has decided:
		// the fit only shapes the estimate, never the status, which still
		// waits for significance.
		if d.Status == Emerging || d.Status == Reliable || float64(d.PValue) < priorStartP || m.priorEveryUnit {
			units = append(units, u)
		}
	}
	if len(units) == 0 {
		return nil
	}
	view, err := m.gram.View()
	if err != nil || int64(view.Bins()) != m.used {
		return nil
	}
	usedB := m.used - m.usedA
	job := &priorJob{epoch: m.prior.epoch, seq: m.updates, view: view, usedA: int(m.usedA), usedB: int(usedB)}
	centred := func(yy, sum float64, n int64) float64 {
		if n == 0 {
			return 0
		}
		return yy - sum*sum/float64(n)
	}
	halves := make([]float64, 2*m.dim*len(units)) // one allocation for all
	for i, u := range units {
		d := details[u]
		h := halves[2*i*m.dim : 2*(i+1)*m.dim]
		in := priorInput{unit: u, emerging: d.Status == Emerging, spikes: m.spikes[u], sta: d.STA, ridge: d.Ridge,
			yy:      centred(m.yy[u], m.spikes[u], m.used),
			spikesA: m.spikesA[u], spikesB: m.spikes[u] - m.spikesA[u],
			halfA: h[:m.dim:m.dim], halfB: h[m.dim:]}
		in.yyA = centred(m.yyA[u], in.spikesA, m.usedA)
		in.yyB = centred(m.yy[u]-m.yyA[u], in.spikesB, usedB)
		job.units = append(job.units, in)
	}
	// The split-half STAs on all cores (reads of the STA after the
	// update's CacheMeans may run concurrently).
	fastmat.Each(len(job.units), halvesTask{m.sta, job.units})
	return job
}

// halvesTask writes the split-half STAs of the job's units.
type halvesTask struct {
	sta   *STA
	units []priorInput
}

func (t halvesTask) Do(i, _ int) {
	in := &t.units[i]
	t.sta.HalvesTo(in.halfA, in.halfB, in.unit)
}
