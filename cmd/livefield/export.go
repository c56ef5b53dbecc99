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
	res, err := replay.Export(ctx, f.Reader, *out, replay.ExportOptions{
		Feed:     replay.FeedOptions{StimuliDir: *stimuli, Lambda: lambda},
		Block:    *block,
		OnDamage: damageLogger(stderr),
		Progress: progressPrinter(stdout),
	})
	if err != nil {
		return err
	}
	fmt.Fprintf(stdout, "livefield: block %s: %d units, %d files in %s (%.1f s)\n", res.Block, len(res.Units), len(res.Files), *out, time.Since(start).Seconds())
	if res.Damaged > 0 {
		fmt.Fprintf(stdout, "livefield: %d damaged spans of the file were skipped\n", res.Damaged)
	}
	return nil
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
