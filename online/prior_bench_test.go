package online

import (
	"math/rand/v2"
	"os"
	"slices"
	"strconv"
	"testing"
	"time"
)

// BenchmarkPriorEvaluate is one evidence evaluation (posterior mean and
// profile log evidence) in the default 7×7 pixel × 6 lag window (d = 294).
func BenchmarkPriorEvaluate(b *testing.B) {
	w := PriorWindow{X0: 4, Y0: 4, T0: 1, NX: 7, NY: 7, NT: 6}
	p := newPriorProblem(w)
	r := rand.New(rand.NewPCG(1, 2))
	k := p.k
	// A Gram matrix of white binary noise over 3600 bins.
	for i := range k {
		p.gram[i*k+i] = 3600
		for j := range i {
			v := 60 * r.NormFloat64()
			p.gram[i*k+j], p.gram[j*k+i] = v, v
		}
		p.c[i] = 10 * r.NormFloat64()
	}
	p.q, p.n = 500, 3600
	h := SmoothLocal{Scale: 1e-3, Noise: 1, Length: [3]float64{1.5, 1.5, 1}, Centre: [3]float64{7, 7, 3}, Width: [3]float64{2, 2, 1.5}}
	b.ReportAllocs()
	for b.Loop() {
		p.mValid = false // a full evaluation, not one that reuses M
		if _, err := p.evaluate(h, true); err != nil {
			b.Fatal(err)
		}
	}
}

// warmPriorUnit runs two minutes of the synthetic rig at the reference
// frame and returns the block, its Gram view, its first linear unit and
// that unit's statistics.
func warmPriorUnit(b *testing.B) (*simBlock, *GramView, int, PriorStats) {
	blk := newSimBlock(b, 7)
	blk.run(2 * 3600)
	view, err := blk.lg.View()
	if err != nil {
		b.Fatal(err)
	}
	u := blk.linearUnits()[0]
	return blk, view, u, blk.stats(view, u)
}

// BenchmarkPriorRefit is one warm refit of one unit at the reference frame
// (16×16 pixels, 12 lags, D = 3072) after two minutes of the synthetic
// rig: the window's Gram from the view, the evidence re-evaluated at the
// last hyperparameters and up to 11 more evaluations of the compass search
// (the default Evaluations of 12), and the full-D posterior mean.
func BenchmarkPriorRefit(b *testing.B) {
	blk, _, u, st := warmPriorUnit(b)
	fitter, _ := NewPriorFitter(blk.width, blk.height, blk.lags, PriorOptions{})
	if _, err := fitter.Refit(u, st); err != nil {
		b.Fatal(err)
	}
	st.Seed = nil // keep the window, as a round-robin refit of a placed unit may
	b.ReportAllocs()
	for b.Loop() {
		if _, err := fitter.Refit(u, st); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkGramView is the copy of a LagGram's statistics that refits read
// (16×16 pixels, 12 lags), once per round of refits.
func BenchmarkGramView(b *testing.B) {
	g, _ := NewLagGram(256, 12)
	r := rand.New(rand.NewPCG(3, 3))
	f := make([]float64, 256)
	for range 2 * 3600 {
		for i := range f {
			f[i] = float64(2*r.IntN(2) - 1)
		}
		_ = g.AddFrame(f)
	}
	b.ReportAllocs()
	for b.Loop() {
		if _, err := g.View(); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkPriorLiveUnit is one unit's turn on the live worker at the
// reference frame (16×16 pixels, 12 lags) after two minutes of the
// synthetic rig, with the live defaults (Config.Prior: 4 evaluations per
// refit of the whole block after the first, 2 per half): three warm
// refits, the whole block and each half (the halves here both use the
// unit's STA; the cost is the same). Its
// time times the number of significant units is how long the worker takes
// to refresh them all on one core.
func BenchmarkPriorLiveUnit(b *testing.B) {
	blk, view, u, st := warmPriorUnit(b)
	cfg, err := Config{Width: blk.width, Height: blk.height, Lags: blk.lags, White: true, PixelVariance: 1}.withDefaults()
	if err != nil {
		b.Fatal(err)
	}
	spikes := blk.spikes(u)
	in := priorInput{unit: u, spikes: spikes, sta: FloatsOf(st.Seed), ridge: FloatsOf(st.Seed), yy: st.YY,
		halfA: st.Seed, halfB: st.Seed, spikesA: spikes / 2, spikesB: spikes / 2, yyA: st.YY / 2, yyB: st.YY / 2}
	job := &priorJob{view: view, usedA: view.Bins() / 2, usedB: view.Bins() / 2, units: []priorInput{in}}
	r := newPriorRunner(cfg)
	if _, ok := r.fit(job, 0); !ok {
		b.Fatal("first fit failed")
	}
	b.ReportAllocs()
	for b.Loop() {
		job.seq++
		if _, ok := r.fit(job, 0); !ok {
			b.Fatal("refit failed")
		}
	}
}

// BenchmarkPriorRound is the live worker's round over the fitted units at
// the reference frame (16×16 pixels, 12 lags, the synthetic rig's simple,
// centre-surround and direction-selective cells at 8 Hz): after two
// minutes and a first (cold) round, each op adds ten seconds of data and
// gives every unit its turn (three warm refits with the live defaults:
// the whole block and each half; the halves here use the unit's STA, the
// cost is the same). The data grow as they do live, so the searches
// reopen when the data grew by a quarter. s/unit is one unit's turn and
// evals/unit its evidence evaluations (which do not depend on the load),
// M-formed/unit those that formed the window's M (the others changed only
// the prior's scale and reuse it, at about half the cost);
// s-round-384 is one round over 384 units on the one worker goroutine
// the mapper starts on two cores (Config.PriorWorkers).
func BenchmarkPriorRound(b *testing.B) {
	for _, c := range []struct {
		name    string
		opt     PriorOptions
		minutes int // of data before the timed rounds
	}{{"window7x7x6", PriorOptions{}, 2}, {"window9x9x8", PriorOptions{WindowPixels: 9, WindowLags: 8}, 2},
		{"window7x7x6-after10min", PriorOptions{}, 10}} {
		b.Run(c.name, func(b *testing.B) {
			blk := newSimBlock(b, 7)
			cfg, err := Config{Width: blk.width, Height: blk.height, Lags: blk.lags, White: true, PixelVariance: 1, Prior: c.opt}.withDefaults()
			if err != nil {
				b.Fatal(err)
			}
			r := newPriorRunner(cfg)
			units := blk.linearUnits()
			var seq int64
			evals := 0  // evidence evaluations, load-independent
			formed := 0 // of which formed M (the others changed only the scale)
			round := func() {
				view, err := blk.lg.View()
				if err != nil {
					b.Fatal(err)
				}
				seq++
				job := &priorJob{seq: seq, view: view, usedA: view.Bins() / 2, usedB: view.Bins() - view.Bins()/2}
				for _, u := range units {
					st := blk.stats(view, u)
					spikes := blk.spikes(u)
					job.units = append(job.units, priorInput{unit: u, spikes: spikes, sta: FloatsOf(st.Seed), ridge: FloatsOf(st.Seed),
						yy: st.YY, halfA: st.Seed, halfB: st.Seed, spikesA: spikes / 2, spikesB: spikes / 2, yyA: st.YY / 2, yyB: st.YY / 2})
				}
				b.StartTimer()
				for i := range job.units {
					if _, ok := r.fit(job, i); !ok {
						b.Fatal("fit failed")
					}
				}
				b.StopTimer()
				for _, u := range units {
					for _, f := range r.fitters {
						if last, ok := f.Last(u); ok {
							evals += last.Evaluations
						}
					}
				}
				formed = 0
				for _, f := range r.fitters {
					if f.prob != nil {
						formed += f.prob.formed
					}
				}
			}
			blk.run(int64(c.minutes) * 3600)
			b.StopTimer()
			round() // the first, cold fits
			b.ResetTimer()
			b.StopTimer()
			evals = 0
			formed0 := formed
			for range b.N {
				blk.run(blk.bins + 10*60)
				round()
			}
			perUnit := b.Elapsed().Seconds() / float64(b.N*len(units))
			b.ReportMetric(perUnit, "s/unit")
			b.ReportMetric(float64(evals)/float64(b.N*len(units)), "evals/unit")
			b.ReportMetric(float64(formed-formed0)/float64(b.N*len(units)), "M-formed/unit")
			b.ReportMetric(perUnit*384/float64(cfg.PriorWorkers), "s-round-384")
		})
	}
}

// BenchmarkPriorLiveRefresh runs the reference workload (16×16 binary noise
// at 60 Hz, 12 lags, 384 units at 10 spikes/s) with the background prior
// fits on their default workers: first LIVEFIELD_REFRESH_START seconds of
// data (default 120) as fast as they go, one update per second of data,
// then LIVEFIELD_REFRESH_SECONDS (default 90) paced at real time, one
// update per wall-clock second, as live. It measures how often each unit's
// smooth-local fit is refreshed in the paced part: the wall-clock gap
// between two updates that bring a newer fit of the unit (its PriorBins
// changed), counted after its first 30 s (the workers catch up with the
// fast part first). refresh-median-s, refresh-p90-s and refresh-max-s
// summarise the gaps over all units; stale-units counts the fitted units
// not refitted in the measured time. Run it by hand, -benchtime 1x.
func BenchmarkPriorLiveRefresh(b *testing.B) {
	seconds, warm, fast := 90, 30, 120
	if s, err := strconv.Atoi(os.Getenv("LIVEFIELD_REFRESH_SECONDS")); err == nil && s > warm {
		seconds = s
	}
	if s, err := strconv.Atoi(os.Getenv("LIVEFIELD_REFRESH_START")); err == nil && s >= 0 {
		fast = s
	}
	for range b.N {
		bw := newBenchWorkload(b, 16, 16, 12, 384, 10)
		for range fast {
			bw.second()
			bw.m.Update()
		}
		type seen struct {
			bins int64
			at   time.Time
		}
		last := map[string]seen{}
		var gaps []float64
		refreshedLate := map[string]bool{}
		start := time.Now()
		for s := range seconds {
			bw.second()
			snap := bw.m.Update()
			now := time.Now()
			for _, u := range snap.Units {
				d, ok := snap.Detail(u.ID)
				if !ok || d.PriorHyper == nil {
					continue
				}
				prev, had := last[u.ID]
				if had && prev.bins == d.PriorBins {
					continue
				}
				if had && s >= warm {
					gaps = append(gaps, now.Sub(prev.at).Seconds())
					refreshedLate[u.ID] = true
				}
				last[u.ID] = seen{d.PriorBins, now}
			}
			time.Sleep(time.Until(start.Add(time.Duration(s+1) * time.Second)))
		}
		stale := 0
		for id := range last {
			if !refreshedLate[id] {
				stale++
			}
		}
		if len(gaps) == 0 {
			b.Fatalf("no unit's fit was refreshed after the first %d s (%d units fitted)", warm, len(last))
		}
		slices.Sort(gaps)
		b.ReportMetric(gaps[len(gaps)/2], "refresh-median-s")
		b.ReportMetric(gaps[len(gaps)*9/10], "refresh-p90-s")
		b.ReportMetric(gaps[len(gaps)-1], "refresh-max-s")
		b.ReportMetric(float64(stale), "stale-units")
		b.ReportMetric(float64(len(last)), "fitted-units")
	}
}
