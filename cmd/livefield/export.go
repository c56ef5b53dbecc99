package main

import (
	"context"
	"fmt"
	"io"
	"path/filepath"
	"time"

	"livefield/replay"
)

func init() {
	register("export", command{
		summary: "run a whole session at full speed and write every unit's estimates (NPY, JSON) and a contact sheet (PNG)",
		usage:   "FILE --out DIR [--block ID] [--stimuli DIR]",
		example: "livefield export testdata/sessions/synth-30s.lfs --out synth-30s-export",
		run:     runExport,
	})
}

func runExport(ctx context.Context, name string, args []string, stdout, stderr io.Writer) error {
	c := commands[name]
	fs := flags(name, c, stderr)
	out := fs.String("out", "", "directory to write into (required; created if needed)")
	block := fs.String("block", "", "block to export (default: the last one)")
	stimuli := fs.String("stimuli", ".", "directory of movie stimulus files")
	file, err := fileArg(fs, args)
	if err != nil {
		return err
	}
	if *out == "" {
		return fmt.Errorf("--out is required (e.g. --out %s-export)", filepath.Base(file))
	}
	f, _, err := openSession(file, stdout)
	if err != nil {
		return err
	}
	defer f.Close()
	start := time.Now()
	res, err := replay.Export(ctx, f.Reader, *out, replay.ExportOptions{
		Feed:     replay.FeedOptions{StimuliDir: *stimuli},
		Block:    *block,
		OnDamage: damageLogger(stderr),
		Progress: func(s replay.FeedStats) {
			fmt.Fprintf(stdout, "livefield: %d messages, %d blocks, %d bins, stream at %.1f s\n", s.Messages, s.Blocks, s.Bins, s.Stream)
		},
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
