package main

import (
	"context"
	"flag"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"runtime/pprof"
	"time"

	"livefield/online"
	"livefield/replay"
)

func runExport(ctx context.Context, fs *flag.FlagSet, args []string, stdout, stderr io.Writer) error {
	out := fs.String("out", "", "directory to write into (required; created if needed)")
	block := fs.String("block", "", "block to export (default: the last one)")
	stimuli := fs.String("stimuli", ".", "directory of movie stimulus files")
	lambdaFlag := fs.String("lambda", "0", "ridge penalty λ; 0 takes the default, 100 × the stimulus pixel variance; \"evidence\" first chooses it by empirical Bayes on the exported block (one more pass)")
	poisson := fs.Bool("poisson", false, "also refine every unit's smooth-local estimate with a Poisson likelihood (exponential LNP, MAP by Newton's method) and write units/NAME.poisson.npy; off by default so that the plain export stays fast: this keeps the block's bins in memory and costs about a second per unit and Newton step on a 30-minute block (e.g. livefield export FILE --out DIR --poisson)")
	cpuProfile := fs.String("cpuprofile", "", "write a CPU profile of the export to this `file` (for developers)")
	file, err := fileArg(fs, args)
	if err != nil {
		return err
	}
	if *cpuProfile != "" {
		pf, err := os.Create(*cpuProfile)
		if err != nil {
			return err
		}
		defer pf.Close()
		if err := pprof.StartCPUProfile(pf); err != nil {
			return err
		}
		defer pprof.StopCPUProfile()
	}
	if *out == "" {
		return fmt.Errorf("--out is required (e.g. --out %s-export)", filepath.Base(file))
	}
	start := time.Now()
	lambda, evidence, err := parseLambda(*lambdaFlag)
	if err != nil {
		return err
	}
	if evidence {
		if lambda, err = evidencePass(ctx, file, *block, *stimuli, stdout, stderr); err != nil {
			return err
		}
	}
	f, _, err := openSession(file, stdout)
	if err != nil {
		return err
	}
	defer f.Close()
	opt := replay.ExportOptions{
		Feed:     replay.FeedOptions{StimuliDir: *stimuli, Lambda: lambda},
		Block:    *block,
		OnDamage: damageLogger(stderr),
		Progress: progressPrinter(stdout),
		Poisson:  *poisson,
	}
	if *poisson {
		opt.PoissonProgress = poissonProgress(stdout)
	}
	res, err := replay.Export(ctx, f.Reader, *out, opt)
	if err != nil {
		return err
	}
	if p := res.Poisson; *poisson {
		fmt.Fprintf(stdout, "livefield: Poisson refinement: %d of %d units with a smooth-local estimate refined (%d converged), %d could not be (see poisson_error in their JSON); %d bins kept in %.1f MB\n",
			p.Fitted, p.Units, p.Converged, p.Failed, p.Bins, float64(p.StoreBytes)/1e6)
	}
	fmt.Fprintf(stdout, "livefield: block %s: %d units, %d files in %s (%.1f s)\n", res.Block, len(res.Units), len(res.Files), *out, time.Since(start).Seconds())
	if res.Damaged > 0 {
		fmt.Fprintf(stdout, "livefield: %d damaged spans of the file were skipped\n", res.Damaged)
	}
	return nil
}

// poissonProgress prints the units refined so far, at the start, at most
// once a second and at the last.
func poissonProgress(w io.Writer) func(done, total int) {
	var start, next time.Time
	return func(done, total int) {
		now := time.Now()
		if done == 0 {
			start, next = now, now.Add(time.Second)
			fmt.Fprintf(w, "livefield: Poisson refinement of the %d units with a smooth-local estimate\n", total)
			return
		}
		if now.After(next) || done == total {
			next = now.Add(time.Second)
			fmt.Fprintf(w, "livefield: Poisson refinement: %d of %d units (%.1f s)\n", done, total, now.Sub(start).Seconds())
		}
	}
}

// evidencePass runs the session once to choose λ by the evidence on the
// exported block (the named one, else the last), printing progress.
func evidencePass(ctx context.Context, file, block, stimuli string, stdout, stderr io.Writer) (float64, error) {
	f, _, err := openSession(file, io.Discard)
	if err != nil {
		return 0, err
	}
	defer f.Close()
	last := ""
	feeder, err := replay.NewFeeder(replay.FeedOptions{
		StimuliDir: stimuli, Evidence: true, UpdateEvery: replay.FinalOnly,
		OnBlockEnd: func(b string, _ *online.Snapshot, _ time.Time) { last = b },
	})
	if err != nil {
		return 0, err
	}
	fmt.Fprintln(stdout, "livefield: choosing λ by the evidence (one pass over the session, then the fit; about a minute at 16×16×12)")
	_, err = feeder.FeedSession(ctx, f.Reader, replay.PassOptions{
		OnDamage: damageLogger(stderr),
		Until:    func() bool { return block != "" && last == block }, // the exported block has ended
	})
	if err != nil {
		return 0, err
	}
	feeder.Finish()
	if block == "" {
		block = last
	}
	lambda, err := feeder.EvidenceLambda(block)
	if err != nil {
		return 0, err
	}
	fmt.Fprintf(stdout, "livefield: evidence choice for block %s: λ = %.4g\n", block, lambda)
	return lambda, nil
}
