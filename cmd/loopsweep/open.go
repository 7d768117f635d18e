package main

import (
	"errors"
	"flag"
	"fmt"
	"io"
	"os"

	"loopsweep/sweep"
	"loopsweep/tui"
)

func init() {
	register(&command{
		name:    "open",
		summary: "browse a saved session on the bench screen, or continue it with instruments",
		usage: `loopsweep open [flags] FILE

Shows the session FILE on the bench screen, read-only: the Bode plot, the
margins against the targets, every point and its attempts. Keys: ←/→ or
h/l move, ? help, q quit.

With --sim or --gen and --dig the session is continued instead, as
'loopsweep sweep --resume FILE' does: unmeasured points are measured, and
points can be re-measured from the screen. The instrument flags are those
of the sweep command.`,
		run: runOpen,
	})
}

// openOnTerminal says whether stdout is a terminal the screen can use;
// tests replace it.
var openOnTerminal = func() bool { return isTerminal(os.Stdout) }

func runOpen(args []string, stdout, stderr io.Writer) error {
	c := commands["open"]
	fs := newFlagSet(c, stderr)
	pm := fs.Float64("pm-target", tui.DefaultPMTargetDeg, "phase margin target for the verdict, degrees")
	gm := fs.Float64("gm-target", tui.DefaultGMTargetDB, "gain margin target for the verdict, dB")
	// Continuing: these are passed on to the sweep command.
	sim := fs.Bool("sim", false, "continue the session on the built-in simulated bench")
	pass := map[string]*string{}
	for _, name := range []string{"scenario", "load", "gen", "dig", "gen-profile", "dig-profile", "timeout"} {
		pass[name] = fs.String(name, "", "as for 'loopsweep sweep' (continuing only)")
	}
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if fs.NArg() != 1 {
		return badInput("want one session FILE, got %d arguments", fs.NArg())
	}
	file := fs.Arg(0)
	set := map[string]bool{}
	fs.Visit(func(f *flag.Flag) { set[f.Name] = true })
	if !(*pm > 0 && *pm < 180) {
		return badInput("--pm-target %g: want degrees between 0 and 180", *pm)
	}
	if !(*gm > 0 && *gm < 200) {
		return badInput("--gm-target %g: want a positive number of dB", *gm)
	}

	if *sim || set["gen"] || set["dig"] {
		// Continue: the sweep command resumes the file.
		fwd := []string{"--resume", file}
		if *sim {
			fwd = append(fwd, "--sim")
		}
		for name, v := range pass {
			if set[name] {
				fwd = append(fwd, "--"+name, *v)
			}
		}
		return runSweep(fwd, stdout, stderr)
	}
	for name := range pass {
		if set[name] {
			return badInput("--%s: only used when continuing with --sim or --gen/--dig", name)
		}
	}

	s, err := sweep.LoadSession(file)
	if err != nil {
		if errors.Is(err, os.ErrNotExist) {
			return badInput("%s: no such file", file)
		}
		return badInput("%v", err)
	}
	if !openOnTerminal() {
		return fmt.Errorf("open %s: the bench screen needs a terminal on stdout", file)
	}
	return tui.Run(tui.Options{
		Session:     *s,
		SessionFile: file,
		PMTargetDeg: *pm,
		GMTargetDB:  *gm,
	})
}
