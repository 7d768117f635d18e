// Command loopsweep measures the frequency response of a feedback loop
// with a SCPI signal generator and a two-channel digitizer, or with the
// built-in simulated bench.
package main

import (
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"sort"
)

// version is the tool version recorded in every session file.
var version = "0.1.0"

// command is one subcommand. Each lives in its own file and registers
// itself from init, so commands can be added without touching main.go.
type command struct {
	name    string
	summary string // one line for the command list
	usage   string // "loopsweep NAME [flags] ARGS" and a paragraph
	// run parses args with its own FlagSet and does the work. It returns
	// a usageError for bad input (exit status 2) and any other error for
	// a failure (exit status 1).
	run func(args []string, stdout, stderr io.Writer) error
}

var commands = map[string]*command{}

func register(c *command) {
	if _, dup := commands[c.name]; dup {
		panic("loopsweep: command registered twice: " + c.name)
	}
	commands[c.name] = c
}

// usageError marks bad input from the user: exit status 2.
type usageError struct{ err error }

func (e *usageError) Error() string { return e.err.Error() }
func (e *usageError) Unwrap() error { return e.err }

// badInput wraps a formatted message as a usageError.
func badInput(format string, a ...any) error {
	return &usageError{fmt.Errorf(format, a...)}
}

// newFlagSet returns a FlagSet whose -h prints the command's usage and
// flags and whose errors come back as usageErrors.
func newFlagSet(c *command, stderr io.Writer) *flag.FlagSet {
	fs := flag.NewFlagSet(c.name, flag.ContinueOnError)
	fs.SetOutput(stderr)
	fs.Usage = func() {
		fmt.Fprintf(stderr, "%s\n\nFlags:\n", c.usage)
		fs.PrintDefaults()
	}
	return fs
}

// parseFlags parses args and turns flag errors into usageErrors; it
// returns flag.ErrHelp after printing help.
func parseFlags(fs *flag.FlagSet, args []string) error {
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return err
		}
		return &usageError{err}
	}
	return nil
}

func mainUsage(w io.Writer) {
	fmt.Fprint(w, `loopsweep measures a feedback loop's frequency response (loop gain by
voltage injection) with a SCPI signal generator and a two-channel
digitizer, and reports crossover frequency, phase margin and gain margin.

Usage:
  loopsweep COMMAND [flags] [args]

Commands:
`)
	names := make([]string, 0, len(commands))
	for n := range commands {
		names = append(names, n)
	}
	sort.Strings(names)
	for _, n := range names {
		fmt.Fprintf(w, "  %-10s %s\n", n, commands[n].summary)
	}
	fmt.Fprint(w, `
Run 'loopsweep COMMAND --help' for a command's flags and units.

Caution: loopsweep injects a signal into live power electronics. Use an
isolating injection transformer, keep the amplitude small, and follow
local codes and licensed practice.
`)
}

func run(args []string, stdout, stderr io.Writer) int {
	if len(args) == 0 {
		mainUsage(stderr)
		return 2
	}
	switch args[0] {
	case "-h", "-help", "--help", "help":
		mainUsage(stdout)
		return 0
	case "-version", "--version", "version":
		fmt.Fprintf(stdout, "loopsweep %s\n", version)
		return 0
	}
	c, ok := commands[args[0]]
	if !ok {
		fmt.Fprintf(stderr, "loopsweep: unknown command %q (run 'loopsweep --help' for the list)\n", args[0])
		return 2
	}
	err := c.run(args[1:], stdout, stderr)
	var ue *usageError
	switch {
	case err == nil:
		return 0
	case errors.Is(err, flag.ErrHelp):
		return 0
	case errors.As(err, &ue):
		fmt.Fprintf(stderr, "loopsweep %s: %v\n", c.name, err)
		return 2
	default:
		fmt.Fprintf(stderr, "loopsweep %s: %v\n", c.name, err)
		return 1
	}
}

func main() {
	os.Exit(run(os.Args[1:], os.Stdout, os.Stderr))
}
