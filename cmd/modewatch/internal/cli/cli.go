// Package cli holds the modewatch commands: flag parsing, loading the
// configuration, wiring the pipeline packages together, and exit codes
// (0 success, 1 runtime failure, 2 usage or configuration error).
package cli

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"sort"
	"strings"
)

// Exit codes of every command.
const (
	ExitOK      = 0 // success
	ExitFailure = 1 // runtime failure (I/O, server, bad input beyond repair)
	ExitUsage   = 2 // usage or configuration error
)

// IO is the process environment a command runs in, so that tests can run
// commands in-process.
type IO struct {
	In  io.Reader
	Out io.Writer
	Err io.Writer
	// Signals, if set, stops delivering the first interrupt to the
	// context so that a second interrupt kills the process at once.
	Signals func()
}

// command is one subcommand.
type command struct {
	name    string
	args    string // argument synopsis for the usage line
	summary string
	run     func(ctx context.Context, env IO, args []string) error
}

var commands []command

func register(c command) { commands = append(commands, c) }

// usageError marks an error that exits with ExitUsage.
type usageError struct{ err error }

func (e usageError) Error() string { return e.err.Error() }
func (e usageError) Unwrap() error { return e.err }

// usagef returns a usage error (exit status 2).
func usagef(format string, args ...any) error {
	return usageError{fmt.Errorf(format, args...)}
}

// errHelp is returned by a command that printed its help.
var errHelp = flag.ErrHelp

// Main runs the command named by args[0] and returns the exit status.
func Main(ctx context.Context, args []string, env IO) int {
	sort.Slice(commands, func(i, j int) bool { return order(commands[i].name) < order(commands[j].name) })
	if len(args) == 0 {
		topUsage(env.Err)
		return ExitUsage
	}
	name := args[0]
	switch name {
	case "help", "-h", "-help", "--help":
		if len(args) > 1 {
			return Main(ctx, []string{args[1], "--help"}, env)
		}
		topUsage(env.Out)
		return ExitOK
	case "-version", "--version":
		name = "version"
	}
	for _, c := range commands {
		if c.name != name {
			continue
		}
		err := c.run(ctx, env, args[1:])
		return exitCode(env, c.name, err)
	}
	fmt.Fprintf(env.Err, "modewatch: unknown command %q\n\n", name)
	topUsage(env.Err)
	return ExitUsage
}

func exitCode(env IO, name string, err error) int {
	if err == nil || errors.Is(err, errHelp) {
		return ExitOK
	}
	var ue usageError
	if errors.As(err, &ue) {
		fmt.Fprintf(env.Err, "modewatch %s: %v\n", name, ue.err)
		fmt.Fprintf(env.Err, "Run \"modewatch %s --help\" for usage.\n", name)
		return ExitUsage
	}
	var ce configError
	if errors.As(err, &ce) {
		fmt.Fprintf(env.Err, "%v\n", ce.err)
		return ExitUsage
	}
	fmt.Fprintf(env.Err, "modewatch %s: %v\n", name, err)
	return ExitFailure
}

// configError marks a configuration problem (exit status 2), printed as is.
type configError struct{ err error }

func (e configError) Error() string { return e.err.Error() }
func (e configError) Unwrap() error { return e.err }

var topOrder = []string{"run", "fit", "replay", "demo", "sim", "check", "token", "tune", "version"}

func order(name string) int {
	for i, n := range topOrder {
		if n == name {
			return i
		}
	}
	return len(topOrder)
}

func topUsage(w io.Writer) {
	fmt.Fprintf(w, `modewatch: advisory monitoring of plant sensor streams with sparse modes, T² and SPE.

Usage:
  modewatch <command> [flags]

Commands:
`)
	for _, c := range commands {
		fmt.Fprintf(w, "  %-8s %s\n", c.name, c.summary)
	}
	fmt.Fprintf(w, `
Every command has --help. Exit status: 0 success, 1 runtime failure, 2 usage or configuration error.
modewatch is advisory: it never acts on the plant; safety decisions follow site procedures,
local codes and licensed practice.
`)
}

// newFlags returns a flag set for a command whose --help prints the usage
// line, the description and the flags to env.Out.
func newFlags(env IO, name, synopsis, description string) *flag.FlagSet {
	fs := flag.NewFlagSet(name, flag.ContinueOnError)
	fs.SetOutput(io.Discard)
	fs.Usage = func() {
		w := env.Out
		fmt.Fprintf(w, "Usage: modewatch %s %s\n\n%s\n", name, synopsis, strings.TrimSpace(description))
		var n int
		fs.VisitAll(func(*flag.Flag) { n++ })
		if n > 0 {
			fmt.Fprintf(w, "\nFlags:\n")
			fs.SetOutput(w)
			fs.PrintDefaults()
			fs.SetOutput(io.Discard)
		}
	}
	return fs
}

// parse parses args; --help prints the usage and returns errHelp; any other
// flag error is a usage error.
func parse(fs *flag.FlagSet, args []string) error {
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return errHelp // the flag package has printed the usage
		}
		return usageError{err}
	}
	return nil
}
