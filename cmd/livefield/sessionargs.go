package main

import (
	"errors"
	"flag"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
	"time"

	"livefield/online"
	"livefield/replay/session"
	"livefield/stream/wire"
)

// fileArg parses args with one positional FILE, before or after the flags.
func fileArg(fs *flag.FlagSet, args []string) (string, error) {
	var file string
	if len(args) > 0 && !strings.HasPrefix(args[0], "-") {
		file, args = args[0], args[1:]
	}
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return "", err
		}
		return "", errUsage
	}
	rest := fs.Args()
	if file == "" && len(rest) > 0 {
		file, rest = rest[0], rest[1:]
	}
	if len(rest) > 0 {
		fmt.Fprintf(fs.Output(), "livefield %s: unexpected argument %q\n", fs.Name(), rest[0])
		fs.Usage()
		return "", errUsage
	}
	if file == "" {
		fmt.Fprintf(fs.Output(), "livefield %s: the session FILE is missing\n", fs.Name())
		fs.Usage()
		return "", errUsage
	}
	return file, nil
}

// pacing holds the --speed and --from flags of replay and practice.
type pacing struct {
	speedText, fromText string
	speed               float64
	from                time.Duration
}

func (p *pacing) add(fs *flag.FlagSet, speedHelp string) {
	fs.StringVar(&p.speedText, "speed", "1", speedHelp)
	fs.StringVar(&p.fromText, "from", "", "start this far into the session (seconds after its first message, or a duration); the running block's start is kept")
}

// fileArg parses args with one positional FILE (fileArg) and checks the
// pacing flags.
func (p *pacing) fileArg(fs *flag.FlagSet, args []string) (string, error) {
	file, err := fileArg(fs, args)
	if err != nil {
		return "", err
	}
	return file, p.check()
}

// check parses the flags' text.
func (p *pacing) check() (err error) {
	if p.speed, err = parseSpeed(p.speedText); err != nil {
		return err
	}
	p.from, err = parseSeconds("--from", p.fromText)
	return err
}

// parseSpeed reads "max" (0: full speed) or a positive factor.
func parseSpeed(s string) (float64, error) {
	if s == "max" {
		return 0, nil
	}
	v, err := strconv.ParseFloat(s, 64)
	if err != nil || !(v > 0) || math.IsInf(v, 0) {
		return 0, fmt.Errorf("--speed %q: give a positive factor (1 is real time) or max", s)
	}
	return v, nil
}

// parseSeconds reads a duration ("90s", "1m30s") or plain seconds ("90").
func parseSeconds(flagName, s string) (time.Duration, error) {
	if s == "" {
		return 0, nil
	}
	if v, err := strconv.ParseFloat(s, 64); err == nil && v >= 0 && !math.IsInf(v, 0) {
		return time.Duration(v * float64(time.Second)), nil
	}
	d, err := time.ParseDuration(s)
	if err != nil || d < 0 {
		return 0, fmt.Errorf("%s %q: give seconds (90) or a duration (1m30s)", flagName, s)
	}
	return d, nil
}

// openSession opens a session file and prints what it holds.
func openSession(path string, stdout io.Writer) (*session.File, string, error) {
	f, err := session.Open(path)
	if err != nil {
		return nil, "", err
	}
	h := f.Header()
	prefix := h.Prefix
	if prefix == "" {
		prefix = wire.Prefix(h.Rig)
	}
	fmt.Fprintf(stdout, "livefield: session %s: rig %q (%s), recorded %s\n", path, h.Rig, prefix, h.Created.Format(time.RFC3339))
	return f, prefix, nil
}

// damageLogger prints each damaged span of a session file.
func damageLogger(stderr io.Writer) func(*session.CorruptError) {
	return func(e *session.CorruptError) { fmt.Fprintf(stderr, "livefield: %v\n", e) }
}

// printSummary prints the block summary of a final snapshot.
func printSummary(w io.Writer, s *online.Snapshot) {
	if s == nil {
		fmt.Fprintln(w, "livefield: no estimates (the session has no block)")
		return
	}
	b := s.Summary
	fmt.Fprintf(w, "livefield: %.1f s of data, %d units: %d significant, %d reliable; block rule met: %v\n",
		float64(s.T), b.Units, b.Significant, b.Reliable, b.Ready)
}
