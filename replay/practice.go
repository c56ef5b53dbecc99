package replay

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"net/http"
	"sort"
	"sync"
	"time"

	"livefield/online"
	"livefield/replay/session"
	"livefield/stream/wire"
)

// Practice states, in order.
const (
	PracticeRunning   = "running"   // the block plays; the trainee may stop
	PracticeFinishing = "finishing" // stopped; the rest of the block runs at full speed
	PracticeDone      = "done"      // the Report is complete
)

// PracticeOptions configure a Practice.
type PracticeOptions struct {
	Feed FeedOptions
	// Speed of the playback before the stop (1 is real time; 0 plays at full
	// speed, useful with StopAt only).
	Speed float64
	// StopAt, when positive, stops by itself once the block has run this
	// long (arrival time after the block start), as a scripted trainee.
	StopAt time.Duration
	// From starts part-way through the session (see PlayOptions.From).
	From time.Duration
	// OnDamage is told of damaged spans of the file (they are skipped).
	OnDamage func(*session.CorruptError)
	// Wait is the pacing sleep (a timer when nil); it must return early
	// when its channel argument is closed.
	Wait func(ctx context.Context, d time.Duration, stop <-chan struct{}) error
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

// Practice replays one block with the future hidden and scores the
// trainee's stop. Stop, State and Report may be called from any goroutine;
// Run from one.
type Practice struct {
	opt    PracticeOptions
	feeder *Feeder

	stopOnce sync.Once
	stopCh   chan struct{}

	mu     sync.Mutex
	report *Report
	state  string

	// Written by Run and by the feeder's callbacks, which may run on an
	// HTTP goroutine (a reset from the page); never held while calling the
	// feeder.
	runMu      sync.Mutex
	block      string
	blockStart time.Time
	ruleSnap   *online.Snapshot
	ruleS      float64
	fullSnap   *online.Snapshot
	blockS     float64

	// Owned by Run.
	lastAt   time.Time
	stopSnap *online.Snapshot
	stopS    float64
}

// NewPractice prepares a practice run.
func NewPractice(opt PracticeOptions) (*Practice, error) {
	if opt.Speed < 0 || math.IsNaN(opt.Speed) {
		return nil, fmt.Errorf("replay: speed %v must be positive", opt.Speed)
	}
	if opt.Speed == 0 && opt.StopAt <= 0 {
		return nil, errors.New("replay: a practice at full speed needs a stop time")
	}
	p := &Practice{opt: opt, stopCh: make(chan struct{}), state: PracticeRunning, ruleS: math.NaN()}
	fo := opt.Feed
	user := fo.OnUpdate
	fo.OnUpdate = func(block string, s *online.Snapshot, at time.Time) {
		p.onUpdate(block, s, at)
		if user != nil {
			user(block, s, at)
		}
	}
	endUser := fo.OnBlockEnd
	fo.OnBlockEnd = func(block string, s *online.Snapshot, at time.Time) {
		p.onBlockEnd(block, s, at)
		if endUser != nil {
			endUser(block, s, at)
		}
	}
	f, err := NewFeeder(fo)
	if err != nil {
		return nil, err
	}
	p.feeder = f
	return p, nil
}

// Source is what the page shows during the practice.
func (p *Practice) Source() *Feeder { return p.feeder }

// Stop is the trainee's decision; later calls do nothing.
func (p *Practice) Stop() { p.stopOnce.Do(func() { close(p.stopCh) }) }

// State is one of PracticeRunning, PracticeFinishing and PracticeDone.
func (p *Practice) State() string {
	p.mu.Lock()
	defer p.mu.Unlock()
	return p.state
}

// Report is the finished report, or nil before it is done.
func (p *Practice) Report() *Report {
	p.mu.Lock()
	defer p.mu.Unlock()
	return p.report
}

func (p *Practice) setState(s string) {
	p.mu.Lock()
	p.state = s
	p.mu.Unlock()
}

func (p *Practice) stopped() bool {
	select {
	case <-p.stopCh:
		return true
	default:
		return false
	}
}

func (p *Practice) onUpdate(block string, s *online.Snapshot, at time.Time) {
	p.runMu.Lock()
	defer p.runMu.Unlock()
	if p.block == "" || block != p.block || p.ruleSnap != nil {
		return
	}
	if s.Summary.Ready {
		p.ruleSnap, p.ruleS = s, at.Sub(p.blockStart).Seconds()
	}
}

func (p *Practice) onBlockEnd(block string, s *online.Snapshot, at time.Time) {
	p.runMu.Lock()
	defer p.runMu.Unlock()
	if p.block != "" && block == p.block && p.fullSnap == nil {
		p.fullSnap, p.blockS = s, at.Sub(p.blockStart).Seconds()
	}
}

// errBlockDone ends the playback once the practised block has ended.
var errBlockDone = errors.New("replay: block done")

// Run plays r: the first block after opt.From at the chosen speed until
// the stop, then the rest of that block at full speed. It returns the
// report (also kept for Report).
func (p *Practice) Run(ctx context.Context, r *session.Reader, name string) (*Report, error) {
	wait := p.opt.Wait
	if wait == nil {
		wait = sleepUnless
	}
	play := PlayOptions{
		Speed:    p.opt.Speed,
		From:     p.opt.From,
		OnDamage: p.opt.OnDamage,
		Wait: func(ctx context.Context, d time.Duration) error {
			if p.stopped() {
				return nil
			}
			return wait(ctx, d, p.stopCh)
		},
	}
	_, err := Play(ctx, r, play, func(rec session.Record) error {
		p.runMu.Lock()
		block, start := p.block, p.blockStart
		p.runMu.Unlock()
		if block != "" && p.stopSnap == nil {
			auto := p.opt.StopAt > 0 && rec.At.Sub(start) > p.opt.StopAt
			if auto {
				p.Stop()
			}
			if p.stopped() {
				p.markStop(start, auto)
			}
		}
		ferr := p.feeder.FeedRecord(rec)
		if block == "" && ferr == nil && rec.Subject == wire.SubjectBlock {
			if id := p.feeder.Stats().Block; id != "" {
				p.runMu.Lock()
				p.block, p.blockStart = id, rec.At
				p.runMu.Unlock()
			}
		}
		p.lastAt = rec.At
		p.runMu.Lock()
		done := p.fullSnap != nil
		p.runMu.Unlock()
		if done {
			return errBlockDone
		}
		return nil
	})
	if err != nil && !errors.Is(err, errBlockDone) {
		return nil, err
	}
	p.runMu.Lock()
	block := p.block
	p.runMu.Unlock()
	if block == "" {
		return nil, errors.New("replay: the session has no block to practise on")
	}
	// When the file ends inside the block, its end is the last record.
	p.feeder.Finish()
	p.runMu.Lock()
	defer p.runMu.Unlock()
	if p.fullSnap == nil {
		return nil, fmt.Errorf("replay: block %q did not finish", p.block)
	}
	rep := p.score(name)
	p.mu.Lock()
	p.report, p.state = rep, PracticeDone
	p.mu.Unlock()
	return rep, nil
}

// markStop keeps what the trainee saw at the stop. The stop time is StopAt
// for a scripted stop, else the arrival time of the last record shown.
func (p *Practice) markStop(blockStart time.Time, auto bool) {
	p.stopSnap = p.feeder.Snapshot()
	p.stopS = p.lastAt.Sub(blockStart).Seconds()
	if auto {
		p.stopS = p.opt.StopAt.Seconds()
	}
	p.setState(PracticeFinishing)
}

func sleepUnless(ctx context.Context, d time.Duration, stop <-chan struct{}) error {
	t := time.NewTimer(d)
	defer t.Stop()
	select {
	case <-t.C:
	case <-stop:
	case <-ctx.Done():
		return ctx.Err()
	}
	return nil
}

// score is called with p.runMu held.
func (p *Practice) score(name string) *Report {
	nan := online.Float(math.NaN())
	rep := &Report{State: PracticeDone, Session: name, Block: p.block, BlockS: online.Float(p.blockS)}
	stop := p.stopSnap
	if stop == nil {
		// Never stopped: the decision was to run the whole block.
		stop, p.stopS = p.fullSnap, p.blockS
	} else {
		rep.Stopped = true
	}
	rep.StopS = online.Float(p.stopS)
	rep.SavedS = online.Float(p.blockS - p.stopS)
	rep.SavedFraction = nan
	if p.blockS > 0 {
		rep.SavedFraction = online.Float((p.blockS - p.stopS) / p.blockS)
	}
	rep.ReadyAtStop = stop.Summary.Ready
	rep.ETAAtStopS = stop.Summary.ETA
	rep.RuleStopS, rep.RuleSavedS, rep.LeadS = nan, nan, nan
	if p.ruleSnap != nil {
		rep.RuleStopS = online.Float(p.ruleS)
		rep.RuleSavedS = online.Float(p.blockS - p.ruleS)
		rep.LeadS = online.Float(p.ruleS - p.stopS)
	}
	full := p.fullSnap
	ids := make([]string, 0, len(full.Units))
	for _, u := range full.Units {
		ids = append(ids, u.ID)
	}
	sort.Strings(ids)
	var sumR, sumS, sumRule float64
	nR, nS, nRule := 0, 0, 0
	minR := math.Inf(1)
	for _, id := range ids {
		fd, _ := full.Detail(id)
		if fd == nil {
			continue
		}
		u := UnitScore{
			ID: id, SpikesFull: fd.Spikes, StatusFull: fd.Status, ReliabilityFull: fd.Reliability,
			StatusAtStop: online.Collecting, ReliabilityAtStop: nan, Ridge: nan, STA: nan, RidgeAtRule: nan,
		}
		if fd.Status == online.Reliable {
			rep.Overall.ReliableFull++
		}
		if sd, ok := stop.Detail(id); ok {
			u.SpikesAtStop, u.StatusAtStop, u.ReliabilityAtStop = sd.Spikes, sd.Status, sd.Reliability
			u.Ridge = online.Float(Pearson(sd.Ridge, fd.Ridge))
			u.STA = online.Float(Pearson(sd.STA, fd.STA))
			if sd.Status == online.Reliable {
				rep.Overall.ReliableAtStop++
			}
		}
		if p.ruleSnap != nil {
			if rd, ok := p.ruleSnap.Detail(id); ok {
				u.RidgeAtRule = online.Float(Pearson(rd.Ridge, fd.Ridge))
			}
		}
		if v := float64(u.Ridge); !math.IsNaN(v) {
			sumR += v
			nR++
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
		rep.Units = append(rep.Units, u)
	}
	o := &rep.Overall
	o.Units, o.Scored = len(rep.Units), nR
	o.MeanRidge, o.MinRidge, o.MeanSTA, o.MeanRidgeRule = nan, nan, nan, nan
	if nR > 0 {
		o.MeanRidge, o.MinRidge = online.Float(sumR/float64(nR)), online.Float(minR)
	}
	if nS > 0 {
		o.MeanSTA = online.Float(sumS / float64(nS))
	}
	if nRule > 0 {
		o.MeanRidgeRule = online.Float(sumRule / float64(nRule))
	}
	rep.Summary = summarize(rep)
	return rep
}

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

// Pearson is the sample correlation coefficient of a and b (NaN when the
// lengths differ, are below 2, or either is constant or not finite).
func Pearson(a, b online.Floats) float64 {
	if len(a) != len(b) || len(a) < 2 {
		return math.NaN()
	}
	var ma, mb float64
	for i := range a {
		ma += float64(a[i])
		mb += float64(b[i])
	}
	n := float64(len(a))
	ma, mb = ma/n, mb/n
	var sab, saa, sbb float64
	for i := range a {
		x, y := float64(a[i])-ma, float64(b[i])-mb
		sab += x * y
		saa += x * x
		sbb += y * y
	}
	if !(saa > 0 && sbb > 0) || math.IsInf(saa, 0) || math.IsInf(sbb, 0) {
		return math.NaN()
	}
	return math.Max(-1, math.Min(1, sab/math.Sqrt(saa*sbb)))
}

// Handler serves the practice endpoints:
//
//	POST /api/practice/stop     the trainee's stop (202 while running)
//	GET  /api/practice/report   {"state": …} while running, the Report when done
func (p *Practice) Handler() http.Handler {
	mux := http.NewServeMux()
	mux.HandleFunc("POST /api/practice/stop", func(w http.ResponseWriter, _ *http.Request) {
		p.Stop()
		writeJSON(w, http.StatusAccepted, map[string]string{"state": p.State()})
	})
	mux.HandleFunc("GET /api/practice/report", func(w http.ResponseWriter, _ *http.Request) {
		if rep := p.Report(); rep != nil {
			writeJSON(w, http.StatusOK, rep)
			return
		}
		writeJSON(w, http.StatusOK, map[string]string{"state": p.State()})
	})
	return mux
}

func writeJSON(w http.ResponseWriter, code int, v any) {
	b, err := json.MarshalIndent(v, "", "  ")
	if err != nil {
		http.Error(w, `{"error":"replay: encoding the report failed"}`, http.StatusInternalServerError)
		return
	}
	w.Header().Set("Content-Type", "application/json")
	w.WriteHeader(code)
	_, _ = w.Write(append(b, '\n'))
}
