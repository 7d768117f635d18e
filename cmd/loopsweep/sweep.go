package main

import (
	"context"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"github.com/mattn/go-isatty"

	"loopsweep/instr"
	"loopsweep/sim"
	"loopsweep/sweep"
	"loopsweep/tui"
)

// TUIInfo is what the bench screen needs besides the engine and its
// events.
type TUIInfo struct {
	Out         string // session file being written
	Settings    sweep.Settings
	Instruments sweep.Instruments
	Sim         bool   // the simulated bench
	Scenario    string // sim scenario and load, when Sim
	Load        string
	Resumed     bool
	// PMTargetDeg and GMTargetDB are the verdict's targets on the screen.
	PMTargetDeg, GMTargetDB float64
}

// runTUI, when set (by tui.go), runs the bench screen on the terminal.
// The command has started eng.Run in its own goroutine with
// Config.Linger and Config.PauseOnError set; runTUI reads events until
// the channel closes or the user quits, and calls eng.Stop() before it
// returns. The command then waits for Run to end (output off, session
// saved).
var runTUI func(eng *sweep.Engine, events <-chan sweep.Event, info TUIInfo) error

func init() {
	register(&command{
		name:    "sweep",
		summary: "measure a loop gain (or a transfer function) with the instruments or the simulated bench",
		usage: `loopsweep sweep [--sim [--scenario NAME] [--load NAME] | --gen ADDR --dig ADDR] [flags]

Steps the generator through the plan, captures both digitizer channels at
each frequency and computes the loop gain L = -V2/V1 (channel 1 on the
node driving the loop, channel 2 on the node returning from it; injection
between them) or, with --measure ratio, H = V2/V1. The session is saved
after every point. On a terminal it opens the bench screen; with
--headless, or when stdout is not a terminal, progress goes to stderr and
a margins summary to stdout (--json for JSON).

Frequencies and voltages take SI prefixes and optional units: 100, 1k,
2.2M, 10kHz, 20mV. Amplitudes are volts peak-to-peak.`,
		run: runSweep,
	})
}

type sweepFlags struct {
	sim                         bool
	scenario, load              string
	gen, dig                    string
	genProfile, digProfile      string
	start, stop, step, freqs    string
	ppd                         int
	amp, maxAmp                 string
	autoAmp                     bool
	settleCycles                float64
	settleMin                   string
	cycles, maxAttempts, budget int
	minSNR                      float64
	switching                   string
	measure                     string
	calibration, saveCal        string
	out, resume, label          string
	pmTarget, gmTarget          float64
	headless, jsonOut           bool
	timeout                     time.Duration
	reconnectWindow             time.Duration
}

func runSweep(args []string, stdout, stderr io.Writer) error {
	c := commands["sweep"]
	fs := newFlagSet(c, stderr)
	d := sweep.Defaults()
	var f sweepFlags
	fs.BoolVar(&f.sim, "sim", false, "use the built-in simulated bench (a SCPI server on 127.0.0.1)")
	fs.StringVar(&f.scenario, "scenario", "", "simulated scenario name or file (with --sim; default the simulator's default)")
	fs.StringVar(&f.load, "load", "", "simulated operating point (with --sim)")
	fs.StringVar(&f.gen, "gen", "", "generator address (host:port, TCPIP::host::port::SOCKET, serial device, USB)")
	fs.StringVar(&f.dig, "dig", "", "digitizer address")
	fs.StringVar(&f.genProfile, "gen-profile", "", "generator profile file (default: the built-in profile)")
	fs.StringVar(&f.digProfile, "dig-profile", "", "digitizer profile file (default: the built-in profile)")
	fs.StringVar(&f.start, "start", fmtSI(d.StartHz), "start frequency, Hz")
	fs.StringVar(&f.stop, "stop", fmtSI(d.StopHz), "stop frequency, Hz")
	fs.IntVar(&f.ppd, "ppd", d.PerDecade, "points per decade (log plan)")
	fs.StringVar(&f.step, "step", "", "linear step, Hz (instead of --ppd)")
	fs.StringVar(&f.freqs, "freqs", "", "explicit comma-separated frequency list, Hz (instead of start/stop)")
	fs.StringVar(&f.amp, "amp", fmtSI(d.AmpVpp), "injection amplitude, Vpp")
	fs.StringVar(&f.maxAmp, "max-amp", fmtSI(d.MaxAmpVpp), "hard amplitude cap, Vpp (never exceeded)")
	fs.BoolVar(&f.autoAmp, "auto-amp", false, "adjust the amplitude per point to reach the target SNR (never above --max-amp)")
	fs.Float64Var(&f.settleCycles, "settle-cycles", d.SettleCycles, "cycles to wait after each change")
	fs.StringVar(&f.settleMin, "settle-min", d.SettleMin.String(), "and at least this long after each change (e.g. 10ms)")
	fs.IntVar(&f.cycles, "cycles", d.Cycles, "minimum cycles per record")
	fs.IntVar(&f.maxAttempts, "max-attempts", d.MaxAttempts, "attempts before a bad point is flagged")
	fs.IntVar(&f.budget, "refine-budget", d.RefineBudget, "points refinement may add near the crossovers (0: none)")
	fs.Float64Var(&f.minSNR, "min-snr", d.MinSNRdB, "SNR below which a point is retried, dB")
	fs.StringVar(&f.switching, "switching", "", "converter switching frequency, Hz (keeps its aliases off the tone)")
	fs.StringVar(&f.measure, "measure", string(d.Measure), "loop (L = -V2/V1, with margins) or ratio (H = V2/V1)")
	fs.StringVar(&f.calibration, "calibration", "", "apply this channel calibration file")
	fs.StringVar(&f.saveCal, "save-calibration", "", "calibration sweep: both probes on one node; write the calibration to this file")
	fs.StringVar(&f.out, "out", "", "session file (default session-YYYYmmdd-HHMMSS.json in the current directory)")
	fs.StringVar(&f.resume, "resume", "", "continue this interrupted session (plan flags are taken from it)")
	fs.StringVar(&f.label, "label", "", "operating point label recorded in the session")
	fs.BoolVar(&f.headless, "headless", false, "no bench screen: progress on stderr, summary on stdout")
	fs.Float64Var(&f.pmTarget, "pm-target", tui.DefaultPMTargetDeg, "phase margin target for the bench screen's verdict, degrees (common practice: 45°, 60° for critical loads)")
	fs.Float64Var(&f.gmTarget, "gm-target", tui.DefaultGMTargetDB, "gain margin target for the bench screen's verdict, dB (common practice: 6–10 dB)")
	fs.BoolVar(&f.jsonOut, "json", false, "print the summary as JSON")
	fs.DurationVar(&f.timeout, "timeout", 5*time.Second, "instrument reply timeout")
	fs.DurationVar(&f.reconnectWindow, "reconnect-window", defaultReconnectWindow,
		"when an instrument stops answering (timeout, lost link): turn the output off and keep reconnecting for this long, then resume at the failed point or give up; a duration such as 30s or 2m (0: fail at once)")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if fs.NArg() > 0 {
		return badInput("unexpected argument %q", fs.Arg(0))
	}
	if f.reconnectWindow < 0 {
		return badInput("--reconnect-window %v: want a duration of 0 or more (0 turns reconnecting off)", f.reconnectWindow)
	}
	set := map[string]bool{}
	fs.Visit(func(fl *flag.Flag) { set[fl.Name] = true })

	var (
		s       sweep.Settings
		resumed *sweep.Session
		err     error
	)
	if f.resume != "" {
		resumed, err = sweep.LoadSession(f.resume)
		if err != nil {
			return badInput("--resume %s: %v", f.resume, err)
		}
		s = resumed.Settings.WithDefaults()
		if f.out == "" {
			f.out = f.resume
		}
	} else {
		s, err = settingsFromFlags(f, set)
		if err != nil {
			return err
		}
	}
	if f.saveCal != "" {
		if f.calibration != "" {
			return badInput("--save-calibration and --calibration: a calibration sweep must not apply a calibration")
		}
		s.Measure = sweep.MeasureRatio
	}
	if err := s.Validate(); err != nil {
		return settingError(err)
	}
	var cal *sweep.Calibration
	if f.calibration != "" {
		if cal, err = sweep.LoadCalibration(f.calibration); err != nil {
			return badInput("--calibration: %v", err)
		}
	}
	if f.out == "" {
		f.out = time.Now().Format("session-20060102-150405.json")
	}
	if f.resume == "" {
		if _, err := os.Stat(f.out); err == nil {
			return badInput("--out %s: the file exists (use --resume to continue it, or another name)", f.out)
		}
	}
	switch {
	case f.sim && (f.gen != "" || f.dig != ""):
		return badInput("--sim and --gen/--dig: choose the simulated bench or instruments, not both")
	case !f.sim && (f.gen == "" || f.dig == ""):
		return badInput("--gen and --dig are both needed (or --sim for the simulated bench)")
	case !f.sim && (f.scenario != "" || f.load != ""):
		return badInput("--scenario and --load need --sim")
	}

	b, err := openBench(f)
	if err != nil {
		return err
	}
	defer b.Close()
	if b.simFsw > 0 && resumed == nil {
		// The simulated converter's switching frequency is known: use it
		// (and stop at half of it) unless the flags say otherwise.
		if !set["switching"] {
			s.SwitchingHz = b.simFsw
		}
		if !set["stop"] && len(s.Frequencies) == 0 {
			s.StopHz = b.simFsw / 2
		}
		if err := s.Validate(); err != nil {
			return settingError(err)
		}
	}
	if b.maxVpp > 0 && s.MaxAmpVpp > b.maxVpp {
		return badInput("--max-amp %g Vpp is above the generator profile's limit of %g Vpp", s.MaxAmpVpp, b.maxVpp)
	}

	// The guard enforces the amplitude cap and the output rules below the
	// engine, whatever it does; the safety turns the output off and saves
	// the session on every exit: return, signal (SIGINT, SIGTERM,
	// SIGHUP) or panic. Its deferred Done runs before b.Close.
	// Behind it, an off that gets no answer is sent over a new link too
	// (offFallback), so a fault mid-sweep leaves the output off at once.
	guard, err := sweep.NewGuard(offFallback{b.gen, b.genAddr, b.genProf, f.timeout}, s.MaxAmpVpp, nil)
	if err != nil {
		return badInput("--max-amp: %v", err)
	}
	// The save func runs on the safety's signal goroutine, so the engine
	// reaches it through an atomic pointer, set once it exists.
	var engPtr atomic.Pointer[sweep.Engine]
	off := guard.Shutdown
	if b.genAddr != "" && b.genProf != nil {
		off = offWithFallback(guard.Shutdown, b.genAddr, b.genProf, 2*time.Second)
	}
	sf := newSafety(off, func() error {
		if e := engPtr.Load(); e != nil {
			return e.Save()
		}
		return nil
	})
	defer sf.Done()
	ctx := sf.Context()

	// An instrument that stops answering mid-sweep is opened again from
	// the same addresses and profiles, within --reconnect-window.
	var reconnect func(context.Context) (sweep.Generator, sweep.Digitizer, error)
	if f.reconnectWindow > 0 {
		rl := &relinker{b: b, genAddr: b.genAddr, digAddr: b.info.DigitizerAddr, genProfile: f.genProfile, digProfile: f.digProfile,
			timeout: f.timeout, guard: guard, want: b.info}
		reconnect = rl.Reconnect
	}

	tui := runTUI != nil && !f.headless && isTerminal(os.Stdout)
	events := make(chan sweep.Event, 64)
	eng, err := sweep.New(sweep.Config{
		Settings:       s,
		Gen:            guard,
		Dig:            b.dig,
		Out:            f.out,
		Session:        resumed,
		Calibration:    cal,
		Instruments:    b.info,
		OperatingPoint: f.label,
		ToolVersion:    version,
		ACCoupling:     b.ac,
		FixedOffset:    b.fixedOff,
		MaxPoints:      b.maxPoints,
		PauseOnError:   tui,
		Linger:         tui,
		Events:         events,

		Reconnect:       reconnect,
		ReconnectWindow: f.reconnectWindow,
	})
	if err != nil {
		return settingError(err)
	}
	engPtr.Store(eng)
	if tui {
		info := TUIInfo{Out: f.out, Settings: eng.Settings(), Instruments: b.info, Sim: f.sim, Scenario: f.scenario, Load: f.load, Resumed: resumed != nil, PMTargetDeg: f.pmTarget, GMTargetDB: f.gmTarget}
		runErr := make(chan error, 1)
		sf.Go(func() { runErr <- eng.Run(ctx) })
		terr := runTUI(eng, events, info)
		eng.Stop()
		for range events {
		}
		rerr := <-runErr
		if rerr != nil {
			b.forceOff(stderr)
		}
		if terr != nil {
			return terr
		}
		return finish(eng, rerr, f, stdout, stderr, true)
	}
	var wg sync.WaitGroup
	wg.Add(1)
	sf.Go(func() {
		defer wg.Done()
		progress(events, eng, stderr)
	})
	rerr := eng.Run(ctx)
	wg.Wait()
	if rerr != nil {
		b.forceOff(stderr)
	}
	return finish(eng, rerr, f, stdout, stderr, false)
}

// finish reports the end of a sweep: the summary (text or JSON) on
// stdout, the calibration file when asked, and the error that makes the
// exit status non-zero.
func finish(eng *sweep.Engine, rerr error, f sweepFlags, stdout, stderr io.Writer, quiet bool) error {
	snap := eng.Snapshot()
	if rerr != nil {
		if errors.Is(rerr, context.Canceled) {
			return fmt.Errorf("interrupted: output off, session saved to %s (continue with --resume %s)", f.out, f.out)
		}
		if sweep.IsInstrumentFault(rerr) {
			return fmt.Errorf("sweep failed (output off, %d points saved to %s; continue with --resume %s): %w", countMeasured(&snap), f.out, f.out, rerr)
		}
		return fmt.Errorf("sweep failed (output off, %d points saved to %s): %w", countMeasured(&snap), f.out, rerr)
	}
	if f.saveCal != "" {
		c, err := sweep.CalibrationFromSession(&snap)
		if err != nil {
			return err
		}
		if err := sweep.SaveCalibration(f.saveCal, c); err != nil {
			return err
		}
		fmt.Fprintf(stderr, "calibration written to %s\n", f.saveCal)
	}
	sum, err := sweep.Summary(&snap)
	if err != nil {
		return fmt.Errorf("summarise %s: %w", f.out, err)
	}
	if f.jsonOut {
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		if err := enc.Encode(sum); err != nil {
			return err
		}
	} else if !quiet {
		if err := sum.WriteText(stdout); err != nil {
			return err
		}
		fmt.Fprintf(stdout, "session: %s\n", f.out)
	}
	if eng.State() == sweep.Stopped && !snap.Complete && !quiet {
		// Headless, only a signal stops a sweep; on the bench screen the
		// user's quit is a choice, not a failure.
		return fmt.Errorf("stopped before the plan was complete; session saved to %s", f.out)
	}
	return nil
}

func countMeasured(s *sweep.Session) int {
	n := 0
	for _, p := range s.Points {
		if len(p.Attempts) > 0 {
			n++
		}
	}
	return n
}

// progress prints one line per point on w: point k/N, frequency, ETA
// (elapsed time per completed point times the points left).
func progress(events <-chan sweep.Event, eng *sweep.Engine, w io.Writer) {
	start := time.Now()
	done := 0
	// Test-only: the safety end-to-end test sets this to make the progress
	// goroutine panic after N measured points, so the panic exit path
	// (output off, session kept) is exercised on the real binary.
	panicAfter, _ := strconv.Atoi(os.Getenv("LOOPSWEEP_TEST_PANIC_AFTER"))
	nPoints := func() int { s := eng.Snapshot(); return len(s.Points) }
	for ev := range events {
		if reportReconnect(w, ev, nPoints) {
			continue
		}
		switch ev := ev.(type) {
		case sweep.PointStarted:
			snap := eng.Snapshot()
			n := len(snap.Points)
			measured := countMeasured(&snap)
			eta := "?"
			if done > 0 && measured < n {
				per := time.Since(start) / time.Duration(done)
				eta = (per * time.Duration(n-measured)).Round(100 * time.Millisecond).String()
			} else if measured >= n {
				eta = "refining"
			}
			fmt.Fprintf(w, "point %d/%d  %s Hz  attempt %d  ETA %s\n", ev.Index+1, n, fmtSI(ev.FreqHz), ev.Attempt, eta)
		case sweep.PointMeasured:
			done++
			if panicAfter > 0 && done == panicAfter {
				panic(fmt.Sprintf("test hook: %d points measured", done))
			}
		case sweep.PointFlagged:
			fmt.Fprintf(w, "flagged point %d: %s\n", ev.Index+1, ev.Reason)
		case sweep.PointAdded:
			fmt.Fprintf(w, "refinement: added %s Hz\n", fmtSI(ev.FreqHz))
		case sweep.ErrorEvent:
			fmt.Fprintf(w, "error: %v\n", ev.Err)
		}
	}
}

func settingsFromFlags(f sweepFlags, set map[string]bool) (sweep.Settings, error) {
	s := sweep.Defaults()
	var err error
	si := func(name, val, unit string) float64 {
		if err != nil || val == "" {
			return 0
		}
		v, e := sweep.ParseSI(val, unit)
		if e != nil {
			err = badInput("--%s %q: want a number with an optional SI prefix and unit %s (e.g. 10k%s)", name, val, unit, unit)
		}
		return v
	}
	s.StartHz = si("start", f.start, "Hz")
	s.StopHz = si("stop", f.stop, "Hz")
	s.LinearStep = si("step", f.step, "Hz")
	s.AmpVpp = si("amp", f.amp, "V")
	s.MaxAmpVpp = si("max-amp", f.maxAmp, "V")
	s.SwitchingHz = si("switching", f.switching, "Hz")
	if err != nil {
		return s, err
	}
	if !set["amp"] && s.AmpVpp > s.MaxAmpVpp {
		s.AmpVpp = s.MaxAmpVpp
	}
	if f.freqs != "" {
		for _, part := range strings.Split(f.freqs, ",") {
			v, e := sweep.ParseSI(part, "Hz")
			if e != nil {
				return s, badInput("--freqs: entry %q: want a frequency with an optional SI prefix", strings.TrimSpace(part))
			}
			s.Frequencies = append(s.Frequencies, v)
		}
	}
	if set["step"] && !(s.LinearStep > 0) {
		return s, badInput("--step %q: want a positive frequency step", f.step)
	}
	if f.ppd <= 0 {
		return s, badInput("--ppd %d: at least 1 point per decade is needed", f.ppd)
	}
	s.PerDecade = f.ppd
	if s.LinearStep > 0 {
		s.PerDecade = 0
	}
	if f.cycles <= 0 {
		return s, badInput("--cycles %d: at least 1 cycle per record is needed", f.cycles)
	}
	s.Cycles = f.cycles
	s.SettleCycles = f.settleCycles
	if s.SettleMin, err = parseSeconds(f.settleMin); err != nil {
		return s, badInput("--settle-min %q: want a duration such as 10ms or 0.5s", f.settleMin)
	}
	s.MaxAttempts = f.maxAttempts
	s.RefineBudget = f.budget
	s.MinSNRdB = f.minSNR
	s.AutoAmp = f.autoAmp
	s.Measure = sweep.Measure(f.measure)
	return s, nil
}

// parseSeconds accepts a Go duration ("10ms") or seconds with an SI
// prefix ("10m", "0.01", "10ms").
func parseSeconds(v string) (time.Duration, error) {
	if d, err := time.ParseDuration(v); err == nil {
		return d, nil
	}
	x, err := sweep.ParseSI(v, "s")
	if err != nil {
		return 0, err
	}
	return time.Duration(x * float64(time.Second)), nil
}

// settingFlag maps a Settings JSON name to the flag that sets it.
var settingFlag = map[string]string{
	"start_hz": "start", "stop_hz": "stop", "per_decade": "ppd", "linear_step_hz": "step",
	"frequencies_hz": "freqs", "measure": "measure", "amp_vpp": "amp", "max_amp_vpp": "max-amp",
	"settle_cycles": "settle-cycles", "settle_min_ns": "settle-min", "cycles": "cycles",
	"switching_hz": "switching", "min_snr_db": "min-snr", "max_attempts": "max-attempts",
	"refine_budget": "refine-budget",
}

func settingError(err error) error {
	var se *sweep.SettingError
	if errors.As(err, &se) {
		if fl, ok := settingFlag[se.Setting]; ok {
			return badInput("--%s: %s", fl, se.Msg)
		}
		return badInput("setting %s: %s", se.Setting, se.Msg)
	}
	return err
}

// fmtSI formats x with an SI prefix, the inverse of sweep.ParseSI for
// flag defaults.
func fmtSI(x float64) string {
	switch a := abs(x); {
	case a >= 1e6:
		return strconv.FormatFloat(x/1e6, 'g', 6, 64) + "M"
	case a >= 1e3:
		return strconv.FormatFloat(x/1e3, 'g', 6, 64) + "k"
	case a >= 1 || a == 0:
		return strconv.FormatFloat(x, 'g', 6, 64)
	case a >= 1e-3:
		return strconv.FormatFloat(x*1e3, 'g', 6, 64) + "m"
	default:
		return strconv.FormatFloat(x*1e6, 'g', 6, 64) + "u"
	}
}

func abs(x float64) float64 {
	if x < 0 {
		return -x
	}
	return x
}

// isTerminal says whether f is a terminal (not merely a character
// device such as /dev/null).
func isTerminal(f *os.File) bool {
	return isatty.IsTerminal(f.Fd())
}

// bench is the pair of instruments a sweep drives, and what closes them.
type bench struct {
	gen       sweep.Generator
	dig       sweep.Digitizer
	info      sweep.Instruments
	ac        bool
	fixedOff  bool
	maxPoints int
	maxVpp    float64 // the generator profile's limit, 0 when none
	simFsw    float64 // the simulated converter's switching frequency
	genAddr   string  // for forceOff
	genProf   *instr.Profile
	closers   []func() error
	links     links // the instrument links (a reconnect replaces them), closed by one of closers
}

// Close closes the connections (and the simulator) in reverse order.
func (b *bench) Close() error {
	var first error
	for i := len(b.closers) - 1; i >= 0; i-- {
		if err := b.closers[i](); err != nil && first == nil {
			first = err
		}
	}
	b.closers = nil
	return first
}

// forceOff makes sure the generator's output is off after a failed
// sweep: the engine already sent the command, but over a connection that
// may have died, so a fresh connection sends it again (connecting a
// generator driver turns its output off). Errors are reported, not
// returned: the sweep's own error is the one that matters.
func (b *bench) forceOff(stderr io.Writer) {
	if b.genAddr == "" || b.genProf == nil {
		return
	}
	c, err := instr.Open(b.genAddr, instr.Options{DialTimeout: 2 * time.Second})
	if err != nil {
		fmt.Fprintf(stderr, "warning: could not reconnect to the generator at %s to turn its output off: %v\n", b.genAddr, err)
		return
	}
	defer c.Close()
	if _, err := instr.NewGenerator(instr.NewSession(c, 2*time.Second), b.genProf); err != nil {
		fmt.Fprintf(stderr, "warning: could not turn the generator's output off at %s: %v\n", b.genAddr, err)
	}
}

// drainingGen adds the session's error-queue drain to a generator whose
// profile says the instrument keeps one, so the engine's drain after
// every point (sweep.ErrorDrainer) catches an error the generator raised
// on its own while the point settled and was captured: its own commands
// were sent, and checked, at the start of the point. The digitizer gets
// no such wrapper: its driver drains the queue at the end of Capture,
// the last exchange of a point, so a second drain right after it would
// only cost a round trip.
type drainingGen struct {
	*instr.Generator
	s *instr.Session
}

func (g drainingGen) DrainErrors(ctx context.Context) error { return g.s.DrainErrors(ctx) }

func loadProfile(flagName, path, kind string) (*instr.Profile, error) {
	if path == "" {
		return instr.BuiltinProfile(kind)
	}
	p, err := instr.LoadProfile(path)
	if err != nil {
		return nil, badInput("--%s: %v", flagName, err)
	}
	if p.Kind != kind {
		return nil, badInput("--%s %s: a %s profile, not a %s profile", flagName, path, p.Kind, kind)
	}
	return p, nil
}

// openInstruments connects to both instruments and identifies them. An
// unreachable or silent instrument is bad input (exit status 2): nothing
// has been enabled yet.
func openInstruments(b *bench, genAddr, digAddr, genProfile, digProfile string, timeout time.Duration) error {
	gp, err := loadProfile("gen-profile", genProfile, "generator")
	if err != nil {
		return err
	}
	dp, err := loadProfile("dig-profile", digProfile, "digitizer")
	if err != nil {
		return err
	}
	gc, err := instr.Open(genAddr, instr.Options{})
	if err != nil {
		return badInput("--gen %s: %v", genAddr, err)
	}
	b.closers = append(b.closers, gc.Close)
	gs := instr.NewSession(gc, timeout)
	g, err := instr.NewGenerator(gs, gp)
	if err != nil {
		return badInput("--gen %s: %v", genAddr, err)
	}
	dc, err := instr.Open(digAddr, instr.Options{})
	if err != nil {
		return badInput("--dig %s: %v", digAddr, err)
	}
	b.closers = append(b.closers, dc.Close)
	ds := instr.NewSession(dc, timeout)
	d, err := instr.NewDigitizer(ds, dp)
	if err != nil {
		return badInput("--dig %s: %v", digAddr, err)
	}
	b.gen, b.dig = g, d
	b.genAddr, b.genProf = genAddr, gp
	if gp.Generator.CheckErrors {
		b.gen = drainingGen{g, gs}
	}
	b.ac = d.SupportsAC()
	b.fixedOff = !d.SupportsOffset()
	b.maxPoints = d.MaxPoints()
	b.maxVpp = g.MaxVpp()
	b.info = sweep.Instruments{
		GeneratorIDN: g.IDN(), DigitizerIDN: d.IDN(),
		GeneratorAddr: genAddr, DigitizerAddr: digAddr,
		GeneratorProfile: gp.Source, DigitizerProfile: dp.Source,
	}
	return nil
}

// openBench opens the instruments, or starts the simulated bench on a
// free loopback port and connects to it through the same drivers.
func openBench(f sweepFlags) (*bench, error) {
	b := &bench{}
	genAddr, digAddr := f.gen, f.dig
	if f.sim {
		srv, err := sim.Start(sim.Options{Listen: "127.0.0.1:0", Scenario: f.scenario, Load: f.load})
		if err != nil {
			return nil, badInput("--sim: %v", err)
		}
		b.closers = append(b.closers, srv.Close)
		b.simFsw = srv.Scenario().SwitchingHz
		genAddr, digAddr = srv.GenAddr(), srv.DigAddr()
	}
	base := len(b.closers)
	if err := openInstruments(b, genAddr, digAddr, f.genProfile, f.digProfile, f.timeout); err != nil {
		b.Close()
		return nil, err
	}
	// openInstruments registers only the links' closers: keep them
	// apart, so a reconnect (relinker) can close and replace them.
	b.links.swap(append([]func() error(nil), b.closers[base:]...))
	b.closers = append(b.closers[:base:base], b.links.Close)
	return b, nil
}
