package main

import (
	"context"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"time"

	"livefield/replay"
	"livefield/replay/session"
)

// recordProgressEvery is how often record prints its counts.
const recordProgressEvery = 5 * time.Second

func runRecord(ctx context.Context, fs *flag.FlagSet, args []string, stdout, stderr io.Writer) error {
	var nf natsFlags
	nf.add(fs, requiredNATS)
	rig := fs.String("rig", "", "rig name (required); records livefield.<rig>.>")
	out := fs.String("out", "", "session file to create (required; an existing file is never overwritten)")
	if err := parse(fs, args); err != nil {
		return err
	}
	log := slog.New(slog.NewTextHandler(stderr, nil))
	prefix, err := rigPrefix(*rig)
	if err != nil {
		return err
	}
	if *out == "" {
		return fmt.Errorf("--out is required (e.g. --out %s.lfs)", *rig)
	}
	nc, err := nf.dial("livefield record "+*rig, log)
	if err != nil {
		return err
	}
	defer nc.Close()
	w, err := session.Create(*out, session.Header{Rig: *rig, Prefix: prefix, Created: time.Now().UTC()})
	if err != nil {
		return fmt.Errorf("--out: %w", err)
	}
	rec, err := replay.StartRecorder(nc, prefix, w, nil)
	if err != nil {
		w.Close()
		return err
	}
	fmt.Fprintf(stdout, "livefield: recording %s.> from %s into %s (Ctrl-C stops)\n", prefix, redact(nf.url), *out)
	// The ticker checks for a write error every second and prints the
	// counts every recordProgressEvery.
	tick := time.NewTicker(time.Second)
	defer tick.Stop()
	last := time.Now()
	progress := func(what string) {
		st := rec.Stats()
		fmt.Fprintf(stdout, "livefield: %s %d messages, %d bytes, %d blocks", what, st.Messages, st.Bytes, st.Blocks)
		if st.Dropped > 0 {
			fmt.Fprintf(stdout, ", %d dropped by the NATS client (slow consumer)", st.Dropped)
		}
		fmt.Fprintln(stdout)
	}
	for ctx.Err() == nil && rec.Err() == nil {
		select {
		case <-ctx.Done():
		case now := <-tick.C:
			if now.Sub(last) >= recordProgressEvery {
				last = now
				progress("recorded")
			}
		}
	}
	err = rec.Close()
	progress("wrote")
	if err != nil {
		return fmt.Errorf("%w; the part written so far stays readable", err)
	}
	return nil
}
