package sim

import (
	"math/cmplx"
	"regexp"
	"strings"
	"testing"
)

// errReply is the IEEE 488.2 form of a SYSTem:ERRor? reply.
var errReply = regexp.MustCompile(`^-?\d+,".*"$`)

// FuzzCommandLine feeds arbitrary program lines to both instruments'
// command parser and dispatcher (in process: no sockets, and no
// INITiate, *OPC? or TRACe:DATA?, which wait for real acquisition time).
// Properties: no panic; a parsed header re-joined from its nodes parses
// to the same nodes; the error queue always answers in the 488.2 form
// and ends with 0,"No error"; settings stay within the instrument's
// limits.
func FuzzCommandLine(f *testing.F) {
	for _, s := range []string{
		"*IDN?", "SOURce1:FREQuency 1000;:OUTP ON", "sour:volt 0.1;volt?", "SENS2:VOLT:RANG 0.2",
		"SENS:SWE:TINT 1.5e-6;SWE:TINT?", "FORM INT,8;FORM:BORD SWAP", "OUTP1:STAT MAYBE",
		"SYST:ERR?", "::", ";;;", "*", "FREQ 1e400", "SENS:SWE:POIN 4e6", `A "q;uote";B`, "SOUR99:FREQ 1",
	} {
		f.Add(s)
	}
	sc, err := LoadScenario("")
	if err != nil {
		f.Fatal(err)
	}
	s := newServer(sc, sc.Points[0], Options{})
	f.Fuzz(func(t *testing.T, line string) {
		s.resetGen()
		s.resetDig()
		s.genQ, s.digQ = nil, nil
		for _, part := range splitCommands(line) {
			c, ok := parseCommand(part)
			if ok && !c.common {
				again, ok2 := parseCommand(strings.Join(c.nodes, ":") + map[bool]string{true: "?"}[c.query])
				if !ok2 || strings.Join(again.nodes, ":") != strings.Join(c.nodes, ":") {
					t.Fatalf("header %q re-joined does not parse the same: %q", c.header, again.nodes)
				}
			}
			if ok && (matches(opcEntry, c) || matches(traceEntry, c) || matches(entry{pat: compilePattern("INITiate[:IMMediate]")}, c)) {
				continue
			}
			for _, gen := range []bool{true, false} {
				s.execute(part, gen)
			}
		}
		for _, gen := range []bool{true, false} {
			for i := 0; ; i++ {
				out, _, _ := s.execute("SYST:ERR?", gen)
				if !errReply.Match(out) {
					t.Fatalf("SYST:ERR? reply %q", out)
				}
				if string(out) == `0,"No error"` {
					break
				}
				if i > maxErrors {
					t.Fatal("error queue does not empty")
				}
			}
		}
		g, d := s.gen, s.dig
		if g.freqHz < MinFreqHz || g.freqHz > MaxFreqHz || g.vpp < MinVpp || g.vpp > MaxVpp ||
			d.points < 1 || d.points > MaxPoints || d.intervalS < MinIntervalS || d.intervalS > MaxIntervalS {
			t.Fatalf("settings out of limits: %+v %+v", g, d)
		}
		for _, ch := range d.ch {
			if ch.rangeV < MinRangeV || ch.rangeV > MaxRangeV {
				t.Fatalf("range %g out of limits", ch.rangeV)
			}
		}
	})
}

// FuzzParseScenario: any input either fails with an error naming the
// source, or gives a scenario whose values are physical and whose loop
// gain is finite at 1 kHz.
func FuzzParseScenario(f *testing.F) {
	for _, n := range builtinOrder {
		b, err := builtinFS.ReadFile("scenarios/" + n + ".toml")
		if err != nil {
			f.Fatal(err)
		}
		f.Add(string(b))
	}
	f.Add("name = \"x\"\n[power_stage]\nvin_v = -1\n")
	f.Fuzz(func(t *testing.T, src string) {
		sc, err := ParseScenario("fuzz.toml", []byte(src))
		if err != nil {
			if !strings.Contains(err.Error(), "fuzz.toml") {
				t.Fatalf("error %q does not name the file", err)
			}
			return
		}
		if !(sc.VinV > 0 && sc.InductanceH > 0 && sc.CapacitanceF > 0 && sc.RampVpp > 0 && sc.VoutV() < sc.VinV && len(sc.Points) > 0) {
			t.Fatalf("non-physical scenario accepted: %+v", sc)
		}
		for _, p := range sc.Points {
			if !(p.LoadOhm > 0) {
				t.Fatalf("load %g accepted", p.LoadOhm)
			}
			l, err := sc.Loop(p.Name, 1e3)
			if err != nil {
				t.Fatal(err)
			}
			if cmplx.IsNaN(l) {
				t.Fatalf("L(1 kHz) = %v", l)
			}
		}
	})
}
