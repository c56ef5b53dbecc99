package online

import (
	"encoding/json"
	"math"
	"os"
	"strings"
	"testing"
	"time"

	"livefield/replay/synth"
	"livefield/stream/stimulus"
)

// cortexRun drives a Mapper with the synthetic rig (replay/synth.Cortex) on
// its binary noise, one Update per second of data, as the ingest does.
type cortexRun struct {
	t      testing.TB
	m      *Mapper
	rig    *synth.Cortex
	src    stimulus.Source
	truth  map[string]synth.Truth
	frame  []float64
	counts []Count
	k      int64
	period float64
}

func newCortexRun(t testing.TB, sc synth.Scenario, cfg Config) *cortexRun {
	t.Helper()
	if sc.Width == 0 {
		sc.Width, sc.Height = 16, 16
	}
	src, err := stimulus.Open(stimulus.Spec{Type: stimulus.Binary, Width: sc.Width, Height: sc.Height, Seed: sc.Seed}, "")
	if err != nil {
		t.Fatal(err)
	}
	rig, err := synth.New(sc, src)
	if err != nil {
		t.Fatal(err)
	}
	sc = rig.Scenario()
	cfg.Width, cfg.Height, cfg.Lags, cfg.FramePeriod = sc.Width, sc.Height, sc.Lags, sc.FramePeriod
	cfg.White, cfg.PixelVariance = src.White(), src.PixelVariance()
	m, err := NewMapper(cfg)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(m.Close)
	c := &cortexRun{t: t, m: m, rig: rig, src: src, truth: map[string]synth.Truth{},
		frame: make([]float64, sc.Width*sc.Height), period: sc.FramePeriod}
	for _, u := range rig.Units() {
		c.truth[u.ID] = u
		m.Unit(u.ID)
	}
	return c
}

// seconds adds n seconds of bins, with an Update after each second.
func (c *cortexRun) seconds(n int) *Snapshot {
	per := int64(math.Round(1 / c.period))
	var snap *Snapshot
	for range n {
		for range per {
			c.counts = c.counts[:0]
			start := float64(c.k) * c.period
			err := c.rig.Bin(c.k, c.k, start, start+c.period, func(id string, _ float64) {
				c.counts = append(c.counts, Count{Unit: c.m.index[id], N: 1})
			})
			if err != nil {
				c.t.Fatal(err)
			}
			if err := c.src.FrameTo(c.frame, c.k); err != nil {
				c.t.Fatal(err)
			}
			if err := c.m.AddBin(c.frame, c.counts); err != nil {
				c.t.Fatal(err)
			}
			c.k++
		}
		snap = c.m.Update()
	}
	return snap
}

// linear reports whether the unit has a linear filter that the estimates
// can be compared with (simple, centre-surround, direction, low-rate and
// late cells).
func (c *cortexRun) linear(id string) bool { return c.truth[id].Filter != nil }

// r is the correlation of an estimate with the unit's true filter.
func (c *cortexRun) r(id string, est Floats) float64 {
	if est == nil {
		return math.NaN()
	}
	return priorCorr(floats(est), c.truth[id].Filter)
}

// TestMapperPriorInline checks the live plumbing on the synthetic rig with
// the fits inside Update: significant units get a prior estimate of the
// ridge's layout with its hyperparameters, evidence and bins, it is closer
// to the true filter than the ridge after a minute (the claim of Sahani &
// Linden 2003 and Park & Pillow 2011 that smoothness and locality priors
// need less data), the JSON carries it, and two runs agree bit for bit.
func TestMapperPriorInline(t *testing.T) {
	run := func() (*cortexRun, *Snapshot) {
		sc := synth.Scenario{Seed: 3, Units: 6, MeanRate: 16, Gain: 1.5, Width: 12, Height: 12, Lags: 8}
		c := newCortexRun(t, sc, Config{PriorInline: 2, Prior: PriorOptions{WindowPixels: 5, WindowLags: 4}})
		return c, c.seconds(30)
	}
	c, snap := run()
	_, again := run()
	fitted := 0
	for _, u := range snap.Units {
		d, _ := snap.Detail(u.ID)
		d2, _ := again.Detail(u.ID)
		if d.Prior == nil {
			continue
		}
		fitted++
		if len(d.Prior) != len(d.Ridge) || d.PriorHyper == nil || d.PriorBins <= 0 || math.IsNaN(float64(d.PriorLogEvidence)) {
			t.Errorf("unit %s: prior of %d values (ridge %d), hyper %v, bins %d, log evidence %v", u.ID, len(d.Prior), len(d.Ridge), d.PriorHyper, d.PriorBins, d.PriorLogEvidence)
		}
		for i := range d.Prior {
			if math.Float64bits(float64(d.Prior[i])) != math.Float64bits(float64(d2.Prior[i])) {
				t.Fatalf("unit %s prior[%d]: %v then %v", u.ID, i, d.Prior[i], d2.Prior[i])
			}
		}
		if c.linear(u.ID) {
			rp, rr := c.r(u.ID, d.Prior), c.r(u.ID, d.Ridge)
			t.Logf("unit %s (%s): r prior %.3f ridge %.3f; reliability prior %.3f ridge %.3f; %s from %s", u.ID, c.truth[u.ID].Kind, rp, rr, d.PriorReliability, d.Reliability, d.Status, d.Estimate)
			if !(rp > rr) {
				t.Errorf("unit %s: prior r %.3f not above ridge r %.3f", u.ID, rp, rr)
			}
		}
		js, err := json.Marshal(d)
		if err != nil {
			t.Fatal(err)
		}
		keys := []string{`"prior":[`, `"prior_hyper":{"scale":`, `"prior_log_evidence":`, `"prior_bins":`, `"prior_reliability":`}
		if d.Status == Emerging || d.Status == Reliable {
			keys = append(keys, `"estimate":"`)
		}
		for _, key := range keys {
			if !strings.Contains(string(js), key) {
				t.Errorf("unit %s: JSON without %s", u.ID, key)
			}
		}
	}
	if fitted == 0 {
		t.Fatal("no unit got a prior estimate")
	}
}

// TestMapperPriorBackground checks that the background worker publishes
// fits that a later Update picks up, and that Close stops it.
func TestMapperPriorBackground(t *testing.T) {
	sc := synth.Scenario{Seed: 3, Units: 4, MeanRate: 16, Gain: 1.5, Width: 12, Height: 12, Lags: 8}
	c := newCortexRun(t, sc, Config{})
	deadline := time.Now().Add(60 * time.Second)
	for {
		snap := c.seconds(1)
		got := false
		for _, u := range snap.Units {
			if d, _ := snap.Detail(u.ID); d.Prior != nil {
				got = true
			}
		}
		if got {
			break
		}
		if time.Now().After(deadline) {
			t.Fatal("no prior fit published within a minute")
		}
		time.Sleep(20 * time.Millisecond)
	}
	c.m.Close()
	c.m.Close()
	if c.m.prior.worker != nil {
		t.Error("the worker survived Close")
	}
	c.seconds(1) // updates after Close keep working
}

// TestMapperPriorExplore logs r against time for each estimate through the
// mapper at the demo's settings. Set LIVEFIELD_PRIOR_LIVE=1.
func TestMapperPriorExplore(t *testing.T) {
	if os.Getenv("LIVEFIELD_PRIOR_LIVE") == "" {
		t.Skip("set LIVEFIELD_PRIOR_LIVE=1")
	}
	c := newCortexRun(t, synth.Scenario{Seed: 1, Units: 48, MeanRate: 16, Gain: 1.5}, Config{PriorInline: 8})
	type first struct{ s, r float64 }
	turned := map[string]*[2]first{}
	for s := 1; s <= 300; s++ {
		start := time.Now()
		snap := c.seconds(1)
		var rp, rr []float64
		for _, u := range snap.Units {
			d, _ := snap.Detail(u.ID)
			if !c.linear(u.ID) {
				continue
			}
			f := turned[u.ID]
			if f == nil {
				f = &[2]first{}
				turned[u.ID] = f
			}
			sig := d.Status == Emerging || d.Status == Reliable
			if sig && d.Reliability >= 0.9 && f[0].s == 0 {
				f[0] = first{float64(s), c.r(u.ID, d.Ridge)}
			}
			if sig && d.PriorReliability >= 0.9 && f[1].s == 0 {
				f[1] = first{float64(s), c.r(u.ID, d.Prior)}
			}
			if d.Prior == nil {
				continue
			}
			rp = append(rp, c.r(u.ID, d.Prior))
			rr = append(rr, c.r(u.ID, d.Ridge))
		}
		if s%10 == 0 {
			t.Logf("%3d s: %d with prior, median r prior %.3f ridge %.3f; significant %d reliable %d ready %v (%.2f s)", s, len(rp), medianOf(rp), medianOf(rr), snap.Summary.Significant, snap.Summary.Reliable, snap.Summary.Ready, time.Since(start).Seconds())
		}
	}
	for id, f := range turned {
		t.Logf("unit %s (%s): ridge reliable at %.0f s with r %.3f; prior at %.0f s with r %.3f", id, c.truth[id].Kind, f[0].s, f[0].r, f[1].s, f[1].r)
	}
}
