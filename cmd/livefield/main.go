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
	"sort"
	"syscall"
)

// command is one subcommand. Others (record, replay, practice, export) are
// added by putting an entry in commands from their own file's init.
type command struct {
	summary string
	usage   string // the argument line after the command name
	example string
	run     func(ctx context.Context, name string, args []string, stdout, stderr io.Writer) error
}

var commands = map[string]command{}

func register(name string, c command) { commands[name] = c }

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	code := runMain(ctx, os.Args[1:], os.Stdout, os.Stderr)
	stop()
	os.Exit(code)
}

// errUsage marks an error for which the usage was already printed.
var errUsage = errors.New("usage")

func runMain(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	if len(args) == 0 || args[0] == "help" || args[0] == "-h" || args[0] == "--help" || args[0] == "-help" {
		if len(args) > 1 {
			if c, ok := commands[args[1]]; ok {
				_ = c.run(ctx, args[1], []string{"-h"}, stdout, stdout)
				return 0
			}
		}
		usage(stdout)
		if len(args) == 0 {
			return 2
		}
		return 0
	}
	c, ok := commands[args[0]]
	if !ok {
		fmt.Fprintf(stderr, "livefield: unknown command %q\n\n", args[0])
		usage(stderr)
		return 2
	}
	err := c.run(ctx, args[0], args[1:], stdout, stderr)
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
	names := make([]string, 0, len(commands))
	for n := range commands {
		names = append(names, n)
	}
	sort.Strings(names)
	for _, n := range names {
		fmt.Fprintf(w, "  %-10s %s\n", n, commands[n].summary)
	}
	fmt.Fprintln(w, "\nRun \"livefield <command> -h\" for its flags.")
}

// flags makes a FlagSet for a command whose -h prints the usage line, the
// flags with their defaults and an example.
func flags(name string, c command, stderr io.Writer) *flag.FlagSet {
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
