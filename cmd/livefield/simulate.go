package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"time"

	"github.com/nats-io/nats.go"

	"livefield/replay/synth"
	"livefield/stream/stimulus"
)

// synthSettings are the synthetic rig's knobs shared by simulate and demo.
type synthSettings struct {
	seed     uint64
	units    int
	speed    float64
	duration time.Duration
	block    string
	rate     float64 // mean rate of a responsive unit, Hz
	gain     float64 // slope of the units' exponential nonlinearity
}

// addSynthFlags adds the flags for the units' strength, with defaults that
// differ between simulate (a plain rig) and demo (fields that form within
// a few minutes).
func addSynthFlags(fs *flag.FlagSet, s *synthSettings, rate, gain float64) {
	fs.Float64Var(&s.rate, "rate", rate, "mean firing rate of a responsive synthetic unit, Hz")
	fs.Float64Var(&s.gain, "gain", gain, "strength of the synthetic units' fields (slope of the exponential nonlinearity, 0…4]")
}

// publishSynth plays one synthetic block: 16×16 binary noise at 60 Hz
// watched by s.units units on 32 channels.
func publishSynth(ctx context.Context, nc *nats.Conn, prefix string, s synthSettings) error {
	spec := stimulus.Spec{Type: stimulus.Binary, Width: synth.DefaultSide, Height: synth.DefaultSide, Seed: s.seed}
	src, err := stimulus.Open(spec, "")
	if err != nil {
		return err
	}
	rig, err := synth.New(synth.Scenario{Seed: s.seed, Units: s.units, Channels: synth.DefaultChannels, MeanRate: s.rate, Gain: s.gain}, src)
	if err != nil {
		return err
	}
	return synth.Publish(ctx, nc, prefix, rig, synth.PublishOptions{
		Block:    s.block,
		Stimulus: spec,
		Duration: s.duration.Seconds(),
		Speed:    s.speed,
	})
}

func runSimulate(ctx context.Context, fs *flag.FlagSet, args []string, stdout, stderr io.Writer) error {
	var nf natsFlags
	nf.add(fs, requiredNATS)
	rig := fs.String("rig", "", "rig name (required); publishes on livefield.<rig>.block|frames|spikes")
	speed := fs.Float64("speed", 1, "pacing: 1 is real time, 10 ten times faster, 0 as fast as possible")
	duration := fs.Duration("duration", time.Minute, "acquisition time to publish")
	seed := fs.Uint64("seed", 1, "seed of the stimulus and of the units")
	units := fs.Int("units", 48, "number of synthetic units")
	block := fs.String("block", synth.DefaultBlock, "block id")
	var strength synthSettings
	addSynthFlags(fs, &strength, synth.DefaultMeanRate, synth.DefaultGain)
	if err := parse(fs, args); err != nil {
		return err
	}
	log := slog.New(slog.NewTextHandler(stderr, nil))
	prefix, err := rigPrefix(*rig)
	if err != nil {
		return err
	}
	switch {
	case *speed < 0:
		return fmt.Errorf("--speed %v: must be ≥ 0", *speed)
	case *duration <= 0:
		return fmt.Errorf("--duration %v: must be positive", *duration)
	case *units <= 0:
		return fmt.Errorf("--units %d: must be positive", *units)
	case *block == "":
		return errors.New("--block: must not be empty")
	}
	nc, err := nf.dial("livefield simulate "+*rig, log)
	if err != nil {
		return err
	}
	defer nc.Close()
	fmt.Fprintf(stdout, "livefield: publishing %v of block %s on %s.* (%d units, speed %v)\n", *duration, *block, prefix, *units, *speed)
	err = publishSynth(ctx, nc, prefix, synthSettings{seed: *seed, units: *units, speed: *speed, duration: *duration, block: *block, rate: strength.rate, gain: strength.gain})
	if err != nil && ctx.Err() == nil {
		return err
	}
	fmt.Fprintln(stdout, "livefield: done")
	return nil
}
