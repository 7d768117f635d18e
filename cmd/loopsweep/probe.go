package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"strings"
	"time"

	"loopsweep/instr"
	"loopsweep/sweep"
)

func init() {
	register(&command{
		name:    "probe",
		summary: "connect to one instrument, identify it, run its profile's setup and show what it reports",
		usage: `loopsweep probe ADDRESS [--kind generator|digitizer] [--profile FILE] [flags]

The first thing to run at a new bench. Connects to ADDRESS, prints the
*IDN? reply and the error queue. With --kind or --profile it also runs
the profile's setup (for a generator this turns the output OFF and
leaves it off) and shows the error queue again; for a digitizer it then
captures one short record and prints the sample interval, range and
offset the instrument actually chose, and each channel's minimum and
maximum in volts.

ADDRESS forms:
  tcp://HOST[:PORT]   HOST:PORT   192.168.1.20   TCPIP[n]::HOST::PORT::SOCKET   (port 5025 by default)
  serial:///dev/ttyUSB0?baud=115200&data=8&parity=none&stop=1&flow=none
  ASRL/dev/ttyUSB0::INSTR   ASRL1::INSTR   /dev/ttyUSB0
  usbtmc:///dev/usbtmc0   /dev/usbtmc0`,
		run: runProbe,
	})
}

// probeOptions are probe's settings after flag parsing.
type probeOptions struct {
	timeout  time.Duration
	points   int
	interval float64 // seconds
	rangeV   float64 // half window, volts
	offsetV  float64
	ac       bool
}

func runProbe(args []string, stdout, stderr io.Writer) error {
	c := commands["probe"]
	fs := newFlagSet(c, stderr)
	var (
		kind, profile, interval, rng, offset string
		opt                                  probeOptions
	)
	fs.StringVar(&kind, "kind", "", "generator or digitizer (default: the profile's kind; neither: identify only)")
	fs.StringVar(&profile, "profile", "", "profile file (default: the built-in generic profile of --kind)")
	fs.DurationVar(&opt.timeout, "timeout", 5*time.Second, "reply timeout")
	fs.IntVar(&opt.points, "points", 1000, "digitizer: samples per channel in the test record")
	fs.StringVar(&interval, "interval", "1u", "digitizer: sample interval asked for, seconds (SI prefixes: 1u, 10us)")
	fs.StringVar(&rng, "range", "1", "digitizer: input range, volts: the window is offset ± range")
	fs.StringVar(&offset, "offset", "0", "digitizer: window centre, volts")
	fs.BoolVar(&opt.ac, "ac", false, "digitizer: AC-couple both channels")
	// Accept flags before and after the address.
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	rest := fs.Args()
	if len(rest) == 0 {
		return badInput("missing ADDRESS (run 'loopsweep probe --help' for the forms)")
	}
	addr := rest[0]
	if err := parseFlags(fs, rest[1:]); err != nil {
		return err
	}
	if fs.NArg() > 0 {
		return badInput("unexpected argument %q after the address", fs.Arg(0))
	}
	if opt.timeout <= 0 {
		return badInput("--timeout %v: must be positive", opt.timeout)
	}
	if opt.points < 1 {
		return badInput("--points %d: must be positive", opt.points)
	}
	var err error
	if opt.interval, err = sweep.ParseSI(interval, "s"); err != nil || !(opt.interval > 0) {
		return badInput("--interval %q: want a positive time in seconds, e.g. 1u", interval)
	}
	if opt.rangeV, err = sweep.ParseSI(rng, "V"); err != nil || !(opt.rangeV > 0) {
		return badInput("--range %q: want a positive voltage, e.g. 1 or 200m", rng)
	}
	if opt.offsetV, err = sweep.ParseSI(offset, "V"); err != nil || math.IsInf(opt.offsetV, 0) || math.IsNaN(opt.offsetV) {
		return badInput("--offset %q: want a voltage, e.g. 0 or 3.3", offset)
	}
	switch kind {
	case "", "generator", "digitizer":
	default:
		return badInput("--kind %q: want generator or digitizer", kind)
	}
	if _, err := instr.ParseAddress(addr); err != nil {
		return badInput("%v", err)
	}
	var p *instr.Profile
	switch {
	case profile != "":
		p, err = instr.LoadProfile(profile)
		if err != nil {
			return badInput("--profile: %v", err)
		}
		if kind != "" && p.Kind != kind {
			return badInput("--profile %s is a %s profile, but --kind is %s", profile, p.Kind, kind)
		}
	case kind != "":
		if p, err = instr.BuiltinProfile(kind); err != nil {
			return err
		}
	}
	conn, err := instr.Open(addr, instr.Options{DialTimeout: opt.timeout})
	if err != nil {
		return err
	}
	defer conn.Close()
	return probe(context.Background(), stdout, instr.NewSession(conn, opt.timeout), p, opt)
}

// probe identifies the instrument on s, runs p's setup when p is not
// nil, shows the error queue, and for a digitizer captures and
// summarises one record. The generator's output is left off.
func probe(ctx context.Context, w io.Writer, s *instr.Session, p *instr.Profile, opt probeOptions) error {
	fmt.Fprintf(w, "address      %s\n", s.Addr())
	if p == nil {
		idn, err := s.IDN(ctx)
		if err != nil {
			return err
		}
		fmt.Fprintf(w, "*IDN?        %s\n", idn)
		if err := showQueue(ctx, w, s); err != nil {
			if !errors.Is(err, instr.ErrTimeout) {
				return err
			}
			// Not every instrument keeps a SCPI error queue.
			fmt.Fprintln(w, "error queue  no answer to SYSTem:ERRor? (the instrument may not have one)")
		}
		fmt.Fprintln(w, "(give --kind generator|digitizer or --profile FILE to run a profile's setup)")
		return nil
	}
	fmt.Fprintf(w, "profile      %s (%s %q)\n", p.Source, p.Kind, p.Name)
	switch {
	case p.Generator != nil:
		return probeGenerator(ctx, w, s, p)
	case p.Digitizer != nil:
		return probeDigitizer(ctx, w, s, p, opt)
	}
	return fmt.Errorf("profile %s has no generator or digitizer section", p.Source)
}

// showQueue prints and empties the instrument's error queue.
func showQueue(ctx context.Context, w io.Writer, s *instr.Session) error {
	q, err := s.ErrorQueue(ctx)
	printQueue(w, q)
	if err != nil {
		return err
	}
	return nil
}

func printQueue(w io.Writer, q []instr.InstrumentError) {
	if len(q) == 0 {
		fmt.Fprintln(w, "error queue  empty")
		return
	}
	for i, e := range q {
		label := "error queue "
		if i > 0 {
			label = "            "
		}
		fmt.Fprintf(w, "%s %d, %q (after %q)\n", label, e.Code, e.Msg, e.Cmd)
	}
}

// setupFailed prints instrument errors from a driver's setup before
// returning the error.
func setupFailed(w io.Writer, err error) error {
	var q []instr.InstrumentError
	var walk func(error)
	walk = func(e error) {
		if ie, ok := e.(*instr.InstrumentError); ok {
			q = append(q, *ie)
			return
		}
		switch u := e.(type) {
		case interface{ Unwrap() []error }:
			for _, x := range u.Unwrap() {
				walk(x)
			}
		case interface{ Unwrap() error }:
			walk(u.Unwrap())
		}
	}
	walk(err)
	if len(q) > 0 {
		printQueue(w, q)
	}
	return err
}

func probeGenerator(ctx context.Context, w io.Writer, s *instr.Session, p *instr.Profile) error {
	g, err := instr.NewGenerator(s, p)
	if err != nil {
		return setupFailed(w, err)
	}
	fmt.Fprintf(w, "*IDN?        %s\n", g.IDN())
	fmt.Fprintf(w, "setup        %d commands sent, output off\n", len(p.Generator.Setup))
	if p.Generator.CheckErrors {
		printQueue(w, nil) // NewGenerator checked it
	}
	if p.Generator.FrequencyQuery != "" {
		f, err := g.Frequency(ctx)
		if err != nil {
			return err
		}
		fmt.Fprintf(w, "frequency    %s\n", siUnit(f, "Hz"))
	}
	if p.Generator.AmplitudeQuery != "" {
		a, err := g.Amplitude(ctx)
		if err != nil {
			return err
		}
		fmt.Fprintf(w, "amplitude    %s peak-to-peak\n", siUnit(a, "V"))
	}
	if p.Generator.OutputQuery != "" {
		on, err := g.Output(ctx)
		if err != nil {
			return err
		}
		if on {
			return errors.New("output reads back ON after output_off: check the profile's output commands")
		}
		fmt.Fprintln(w, "output       off (read back)")
	}
	if g.MaxVpp() > 0 {
		fmt.Fprintf(w, "max amplitude %s peak-to-peak (profile)\n", siUnit(g.MaxVpp(), "V"))
	}
	return nil
}

func probeDigitizer(ctx context.Context, w io.Writer, s *instr.Session, p *instr.Profile, opt probeOptions) error {
	d, err := instr.NewDigitizer(s, p)
	if err != nil {
		return setupFailed(w, err)
	}
	fmt.Fprintf(w, "*IDN?        %s\n", d.IDN())
	fmt.Fprintf(w, "setup        %d commands sent\n", len(p.Digitizer.Setup))
	if p.Digitizer.CheckErrors {
		printQueue(w, nil)
	}
	coupling := "AC coupling: no"
	if d.SupportsAC() {
		coupling = "AC coupling: yes"
	}
	offset := "offset: no"
	if d.SupportsOffset() {
		offset = "offset: yes"
	}
	maxp := "unknown"
	if d.MaxPoints() > 0 {
		maxp = fmt.Sprint(d.MaxPoints())
	}
	fmt.Fprintf(w, "offers       %s, %s, max record %s\n", coupling, offset, maxp)
	want := instr.CaptureSettings{Points: opt.points, IntervalS: opt.interval}
	for i := range want.Channels {
		want.Channels[i] = instr.ChannelSettings{RangeV: opt.rangeV, OffsetV: opt.offsetV, AC: opt.ac}
	}
	got, err := d.Configure(ctx, want)
	if err != nil {
		return setupFailed(w, err)
	}
	fmt.Fprintf(w, "record       %d points (asked %d)\n", got.Points, want.Points)
	fmt.Fprintf(w, "interval     %s (asked %s), %s/s\n", siUnit(got.IntervalS, "s"), siUnit(want.IntervalS, "s"), siUnit(1/got.IntervalS, "Sa"))
	ch := [2][]float64{make([]float64, got.Points), make([]float64, got.Points)}
	if err := d.Capture(ctx, ch[0], ch[1]); err != nil {
		return setupFailed(w, err)
	}
	for i, c := range got.Channels {
		lo, hi := math.Inf(1), math.Inf(-1)
		for _, v := range ch[i] {
			lo, hi = math.Min(lo, v), math.Max(hi, v)
		}
		cpl := "DC"
		if c.AC {
			cpl = "AC"
		}
		fmt.Fprintf(w, "channel %d    range ±%s around %s %s; min %s max %s\n", i+1,
			siUnit(c.RangeV, "V"), siUnit(c.OffsetV, "V"), cpl, siUnit(lo, "V"), siUnit(hi, "V"))
		if hi > c.OffsetV+c.RangeV || lo < c.OffsetV-c.RangeV {
			fmt.Fprintf(w, "             data outside the window: the range or offset is wrong, or the scale is\n")
		}
	}
	if p.Digitizer.CheckErrors {
		printQueue(w, nil) // Capture checked it
	}
	return nil
}

// siUnit formats v with an SI prefix and a unit, 4 significant digits:
// 1.024e-6 s prints "1.024 µs".
func siUnit(v float64, unit string) string {
	if v == 0 || math.IsNaN(v) || math.IsInf(v, 0) {
		return fmt.Sprintf("%g %s", v, unit)
	}
	prefixes := []struct {
		p string
		m float64
	}{{"G", 1e9}, {"M", 1e6}, {"k", 1e3}, {"", 1}, {"m", 1e-3}, {"µ", 1e-6}, {"n", 1e-9}, {"p", 1e-12}}
	a := math.Abs(v)
	for _, pr := range prefixes {
		if a >= pr.m*0.9999995 {
			return strings.TrimSpace(fmt.Sprintf("%.4g %s%s", v/pr.m, pr.p, unit))
		}
	}
	return fmt.Sprintf("%.4g %s", v, unit)
}
