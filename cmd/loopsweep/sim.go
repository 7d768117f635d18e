package main

import (
	"context"
	"fmt"
	"io"
	"os"
	"os/signal"
	"syscall"

	"loopsweep/sim"
)

func init() {
	register(&command{
		name:    "sim",
		summary: "serve the simulated bench (a SCPI generator and digitizer) on loopback",
		usage: `loopsweep sim [--listen 127.0.0.1:5025] [--scenario NAME|FILE] [--load NAME] [fault flags]

Serves a simulated signal generator on the --listen address and a
two-channel digitizer on the next port (both on free ports with port 0),
modelling a switching converter's loop from a scenario (see
'loopsweep scenarios'). Prints both addresses and serves until Ctrl-C or
SIGTERM. The fault flags make the bench misbehave on purpose, to try a
client's error handling.`,
		run: runSim,
	})
}

func runSim(args []string, stdout, stderr io.Writer) error {
	c := commands["sim"]
	fs := newFlagSet(c, stderr)
	listen := fs.String("listen", "127.0.0.1:5025", "generator address HOST:PORT; the digitizer takes PORT+1 (port 0: two free ports)")
	scenario := fs.String("scenario", "", "built-in scenario name or scenario TOML file (default "+sim.DefaultScenario+")")
	load := fs.String("load", "", "operating point (default the scenario's first)")
	seed := fs.Int64("seed", 1, "noise seed")
	var f sim.Faults
	fs.DurationVar(&f.ReplyDelay, "reply-delay", 0, "fault: delay every reply by this long (e.g. 200ms)")
	fs.IntVar(&f.DropAfter, "drop-after", 0, "fault: drop the connection on the Nth command from now (0: never)")
	fs.IntVar(&f.CorruptBlocks, "corrupt-blocks", 0, "fault: send the next N data blocks with a malformed header")
	fs.IntVar(&f.TruncateBlocks, "truncate-blocks", 0, "fault: send only half of the next N data blocks")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if fs.NArg() > 0 {
		return badInput("unexpected argument %q", fs.Arg(0))
	}
	if f.ReplyDelay < 0 || f.DropAfter < 0 || f.CorruptBlocks < 0 || f.TruncateBlocks < 0 {
		return badInput("fault flags must not be negative")
	}
	sc, err := sim.LoadScenario(*scenario)
	if err != nil {
		return badInput("--scenario: %v", err)
	}
	tm, err := sc.TrueMargins(*load)
	if err != nil {
		return badInput("--load: %v", err)
	}
	srv, err := sim.Start(sim.Options{Listen: *listen, Model: sc, Load: *load, Seed: *seed, Faults: f})
	if err != nil {
		return badInput("--listen %s: %v", *listen, err)
	}
	defer srv.Close()
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	fmt.Fprintf(stdout, "generator %s\ndigitizer %s\n", srv.GenAddr(), srv.DigAddr())
	fmt.Fprintf(stdout, "scenario %s, load %s: %s\n", sc.Name, srv.Load(), marginsLine(tm))
	fmt.Fprintf(stdout, "try: loopsweep sweep --gen tcp://%s --dig tcp://%s\n", srv.GenAddr(), srv.DigAddr())
	<-ctx.Done()
	fmt.Fprintln(stderr, "loopsweep sim: stopped")
	return nil
}
