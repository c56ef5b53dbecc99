// Command livefield maps receptive fields live from a recording rig's spike
// and frame events.
//
// Usage:
//
//	livefield <command> [flags]
//
// Run "livefield help" for the list of commands and "livefield <command> -h"
// for the flags of one.
package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"os/signal"
	"syscall"
)

// command is one subcommand: its name, its help and the function that
// parses its flags (made by runMain, see flags) and runs it.
type command struct {
	name    string
	summary string
	usage   string // the argument line after the command name
	example string
	run     func(ctx context.Context, fs *flag.FlagSet, args []string, stdout, stderr io.Writer) error
}

// commands is every subcommand, in the order of the help.
var commands = []command{
	{
		name:    "demo",
		summary: "run everything in one process: a NATS server, a synthetic rig, the mapping and the page",
		usage:   "[--http ADDR] [--seed S] [--units N] [--block-length D] [--rate HZ] [--gain G]",
		example: "livefield demo --http 127.0.0.1:8080",
		run:     runDemo,
	},
	{
		name:    "export",
		summary: "run a whole session at full speed and write every unit's estimates (NPY, JSON) and a contact sheet (PNG)",
		usage:   "FILE --out DIR [--block ID] [--stimuli DIR] [--lambda L|evidence] [--poisson]",
		example: "livefield export testdata/sessions/synth-30s.lfs --out synth-30s-export",
		run:     runExport,
	},
	{
		name:    "practice",
		summary: "practise deciding when a block can stop: a session plays as if live, you stop it, it is scored",
		usage:   "FILE [--http ADDR] [--speed S] [--from T] [--stop-at T] [--report FILE] [--stimuli DIR]",
		example: "livefield practice testdata/sessions/synth-30s.lfs --speed 2",
		run:     runPractice,
	},
	{
		name:    "record",
		summary: "record every message of one rig into a session file",
		usage:   "--nats URL --rig NAME --out FILE " + natsAuthUsage,
		example: "livefield record --nats nats://127.0.0.1:4222 --rig rig1 --out rig1-2026-05-01.lfs",
		run:     runRecord,
	},
	{
		name:    "replay",
		summary: "play a session file back: timed into NATS with the page, or at full speed into the mapper",
		usage:   "FILE [--speed 1|4|max] [--from T] [--http ADDR] [--nats URL " + natsAuthUsage + "] [--rig NAME] [--stimuli DIR]",
		example: "livefield replay testdata/sessions/synth-30s.lfs --speed 4",
		run:     runReplay,
	},
	{
		name:    "serve",
		summary: "map the live stream of one rig and serve the estimates over HTTP",
		usage:   "--nats URL --rig NAME [--http ADDR] [--stimuli DIR] " + natsAuthUsage + " [--grace D] [--max-units N] [--lambda L|evidence] [--api-token T] [--shard i/n] [--replicas N] [--no-announce] [--no-jetstream]",
		example: "livefield serve --nats nats://127.0.0.1:4222 --rig rig1 --stimuli ./stimuli --http 127.0.0.1:8080",
		run:     runServe,
	},
	{
		name:    "simulate",
		summary: "publish a synthetic rig (binary noise, LNP units with known fields) to NATS",
		usage:   "--nats URL --rig NAME [--speed X] [--duration D] [--seed S] [--units N] [--block ID] [--rate HZ] [--gain G] " + natsAuthUsage,
		example: "livefield simulate --nats nats://127.0.0.1:4222 --rig rig1 --speed 1 --duration 2m --seed 7",
		run:     runSimulate,
	},
	{
		name:    "view",
		summary: "serve one page per rig from all the shard workers that announce themselves on NATS, with a rig selector",
		usage:   "--nats URL [--rig NAME] [--http ADDR] [--api-token T] " + natsAuthUsage,
		example: "livefield view --nats nats://127.0.0.1:4222 --http 127.0.0.1:8090",
		run:     runView,
	},
}

// lookup finds a command by name.
func lookup(name string) (command, bool) {
	for _, c := range commands {
		if c.name == name {
			return c, true
		}
	}
	return command{}, false
}

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	governMemory(ctx)
	code := runMain(ctx, os.Args[1:], os.Stdout, os.Stderr)
	stop()
	os.Exit(code)
}

// errUsage marks an error for which the usage was already printed.
var errUsage = errors.New("usage")

func runMain(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	if len(args) == 0 || args[0] == "help" || args[0] == "-h" || args[0] == "--help" || args[0] == "-help" {
		if len(args) > 1 {
			if c, ok := lookup(args[1]); ok {
				_ = c.run(ctx, flags(c, stdout), []string{"-h"}, stdout, stdout)
				return 0
			}
		}
		usage(stdout)
		if len(args) == 0 {
			return 2
		}
		return 0
	}
	c, ok := lookup(args[0])
	if !ok {
		fmt.Fprintf(stderr, "livefield: unknown command %q\n\n", args[0])
		usage(stderr)
		return 2
	}
	err := c.run(ctx, flags(c, stderr), args[1:], stdout, stderr)
	switch {
	case err == nil, errors.Is(err, flag.ErrHelp):
		return 0
	case errors.Is(err, errUsage):
		return 2
	}
	fmt.Fprintf(stderr, "livefield %s: %v\n", args[0], err)
	return 1
}

func usage(w io.Writer) {
	fmt.Fprintln(w, "livefield maps receptive fields live from a rig's spike and frame events.")
	fmt.Fprintln(w, "\nUsage: livefield <command> [flags]\n\nCommands:")
	for _, c := range commands {
		fmt.Fprintf(w, "  %-10s %s\n", c.name, c.summary)
	}
	fmt.Fprintln(w, "\nRun \"livefield <command> -h\" for its flags.")
}

// flags makes the FlagSet of command c, whose -h prints the usage line, the
// flags with their defaults and an example.
func flags(c command, stderr io.Writer) *flag.FlagSet {
	name := c.name
	fs := flag.NewFlagSet(name, flag.ContinueOnError)
	fs.SetOutput(stderr)
	fs.Usage = func() {
		out := fs.Output()
		fmt.Fprintf(out, "Usage: livefield %s %s\n\n%s\n\nFlags:\n", name, c.usage, c.summary)
		fs.PrintDefaults()
		if c.example != "" {
			fmt.Fprintf(out, "\nExample:\n  %s\n", c.example)
		}
	}
	return fs
}

// parse parses args; a bad flag has already been named by package flag.
func parse(fs *flag.FlagSet, args []string) error {
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return err
		}
		return errUsage
	}
	if fs.NArg() > 0 {
		fmt.Fprintf(fs.Output(), "livefield %s: unexpected argument %q\n", fs.Name(), fs.Arg(0))
		fs.Usage()
		return errUsage
	}
	return nil
}
