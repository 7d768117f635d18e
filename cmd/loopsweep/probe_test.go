package main

import (
	"bytes"
	"context"
	"errors"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"loopsweep/instr"
	"loopsweep/instr/instrtest"
	"loopsweep/sim"
)

func probeSession(t *testing.T, script ...instrtest.Step) *instr.Session {
	t.Helper()
	srv := instrtest.NewServer(t, script...)
	c, err := instr.Open(srv.Addr(), instr.Options{})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { c.Close() })
	return instr.NewSession(c, time.Second)
}

func cmdStep(c string) instrtest.Step    { return instrtest.Step{Cmd: c} }
func qStep(c, r string) instrtest.Step   { return instrtest.Step{Cmd: c, Reply: r + "\n"} }
func emptyQueue() instrtest.Step         { return qStep("SYSTem:ERRor?", `0,"No error"`) }
func queueEntry(r string) instrtest.Step { return qStep("SYSTem:ERRor?", r) }
func builtinFor(t *testing.T, kind string) *instr.Profile {
	t.Helper()
	p, err := instr.BuiltinProfile(kind)
	if err != nil {
		t.Fatal(err)
	}
	return p
}

func TestProbeDigitizer(t *testing.T) {
	// Four samples per channel: channel 1 spans -0.25..0.5 V, channel 2
	// 1.0..1.5 V (values exact in binary32).
	ch1 := []float64{0.5, -0.25, 0, 0.125}
	ch2 := []float64{1, 1.5, 1.25, 1}
	s := probeSession(t,
		qStep("*IDN?", "Acme Testworks,DG-2,42,0.9"),
		cmdStep("*CLS"),
		cmdStep("FORMat:DATA REAL,32"),
		cmdStep("FORMat:BORDer NORMal"),
		emptyQueue(),
		cmdStep("SENSe:SWEep:POINts 4"),
		cmdStep("SENSe:SWEep:TINTerval 1E-06"),
		cmdStep("INPut1:COUPling DC"),
		cmdStep("SENSe1:VOLTage:RANGe 1"),
		cmdStep("SENSe1:VOLTage:OFFSet 0"),
		cmdStep("INPut2:COUPling DC"),
		cmdStep("SENSe2:VOLTage:RANGe 1"),
		cmdStep("SENSe2:VOLTage:OFFSet 0"),
		qStep("SENSe:SWEep:POINts?", "4"),
		qStep("SENSe:SWEep:TINTerval?", "1.024E-06"),
		qStep("SENSe1:VOLTage:RANGe?", "1"),
		qStep("SENSe1:VOLTage:OFFSet?", "0"),
		qStep("SENSe2:VOLTage:RANGe?", "1"),
		qStep("SENSe2:VOLTage:OFFSet?", "0"),
		emptyQueue(),
		cmdStep("INITiate"),
		qStep("*OPC?", "1"),
		instrtest.Step{Cmd: "TRACe:DATA? CH1", Reply: instrtest.Block(instrtest.Real32(ch1, false))},
		instrtest.Step{Cmd: "TRACe:DATA? CH2", Reply: instrtest.Block(instrtest.Real32(ch2, false))},
		emptyQueue(),
	)
	var out bytes.Buffer
	err := probe(context.Background(), &out, s, builtinFor(t, "digitizer"), probeOptions{points: 4, interval: 1e-6, rangeV: 1})
	if err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{
		"*IDN?        Acme Testworks,DG-2,42,0.9",
		"error queue  empty",
		"offers       AC coupling: yes, offset: yes, max record unknown",
		"record       4 points (asked 4)",
		"interval     1.024 µs (asked 1 µs), 976.6 kSa/s", // 1/1.024 µs = 976.5625 kSa/s
		"channel 1    range ±1 V around 0 V DC; min -250 mV max 500 mV",
		"channel 2    range ±1 V around 0 V DC; min 1 V max 1.5 V",
		"data outside the window",
	} {
		if !strings.Contains(out.String(), want) {
			t.Errorf("output lacks %q:\n%s", want, out.String())
		}
	}
}

func TestProbeGeneratorShowsErrors(t *testing.T) {
	s := probeSession(t,
		qStep("*IDN?", "Acme Testworks,WG-1,0001,1.0"),
		cmdStep("*CLS"),
		cmdStep("OUTPut1:STATe OFF"),
		emptyQueue(),
		cmdStep("SOURce1:FUNCtion:SHAPe SINusoid"),
		cmdStep("SOURce1:VOLTage:OFFSet 0"),
		queueEntry(`-113,"Undefined header"`),
		emptyQueue(),
	)
	var out bytes.Buffer
	err := probe(context.Background(), &out, s, builtinFor(t, "generator"), probeOptions{})
	var ie *instr.InstrumentError
	if !errors.As(err, &ie) || ie.Code != -113 {
		t.Fatalf("err = %v, want instrument error -113", err)
	}
	if want := `error queue  -113, "Undefined header" (after "SOURce1:VOLTage:OFFSet 0")`; !strings.Contains(out.String(), want) {
		t.Errorf("output lacks %q:\n%s", want, out.String())
	}
}

func TestProbeGeneratorReadback(t *testing.T) {
	s := probeSession(t,
		qStep("*IDN?", "Acme Testworks,WG-1,0001,1.0"),
		cmdStep("*CLS"),
		cmdStep("OUTPut1:STATe OFF"),
		emptyQueue(),
		cmdStep("SOURce1:FUNCtion:SHAPe SINusoid"),
		cmdStep("SOURce1:VOLTage:OFFSet 0"),
		emptyQueue(),
		qStep("SOURce1:FREQuency?", "1.0E+03"),
		qStep("SOURce1:VOLTage?", "0.1"),
		qStep("OUTPut1:STATe?", "0"),
	)
	var out bytes.Buffer
	if err := probe(context.Background(), &out, s, builtinFor(t, "generator"), probeOptions{}); err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{"frequency    1 kHz", "amplitude    100 mV peak-to-peak", "output       off (read back)"} {
		if !strings.Contains(out.String(), want) {
			t.Errorf("output lacks %q:\n%s", want, out.String())
		}
	}
}

func TestProbeIdentifyOnly(t *testing.T) {
	s := probeSession(t,
		qStep("*IDN?", "Acme Testworks,XY-9,1,1"),
		queueEntry(`-410,"Query INTERRUPTED"`),
		emptyQueue(),
	)
	var out bytes.Buffer
	if err := probe(context.Background(), &out, s, nil, probeOptions{}); err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(out.String(), `-410, "Query INTERRUPTED"`) {
		t.Errorf("output:\n%s", out.String())
	}
}

func TestProbeBadInput(t *testing.T) {
	dir := t.TempDir()
	bad := filepath.Join(dir, "bad.toml")
	os.WriteFile(bad, []byte("kind = \"digitizer\"\nname = \"x\"\nbogus = 1\n"), 0o644)
	tests := []struct {
		args    []string
		wantSub string
	}{
		{[]string{}, "missing ADDRESS"},
		{[]string{"ftp://x"}, `unknown scheme "ftp"`},
		{[]string{"TCPIP::h::INSTR"}, "raw socket"},
		{[]string{"tcp://127.0.0.1:1", "--kind", "scope"}, `--kind "scope"`},
		{[]string{"tcp://127.0.0.1:1", "--profile", bad}, bad + ":3: key bogus: unknown key"},
		{[]string{"--interval", "fast", "tcp://127.0.0.1:1"}, "--interval"},
		{[]string{"tcp://127.0.0.1:1", "extra"}, `unexpected argument "extra"`},
	}
	for _, tc := range tests {
		var stdout, stderr bytes.Buffer
		err := runProbe(tc.args, &stdout, &stderr)
		var ue *usageError
		if !errors.As(err, &ue) || !strings.Contains(err.Error(), tc.wantSub) {
			t.Errorf("probe %q: err = %v, want a usage error containing %q", tc.args, err, tc.wantSub)
		}
	}
}

// The probe against the simulated bench, a SCPI server written
// independently of package instr from the same command list: the
// generic profiles must drive it without an instrument error.
func TestProbeAgainstSimulator(t *testing.T) {
	srv, err := sim.Start(sim.Options{Listen: "127.0.0.1:0"})
	if err != nil {
		t.Fatal(err)
	}
	defer srv.Close()
	for _, tc := range []struct {
		kind, addr string
		want       []string
	}{
		{"generator", "tcp://" + srv.GenAddr(), []string{"error queue  empty", "output       off (read back)"}},
		{"digitizer", "tcp://" + srv.DigAddr(), []string{"error queue  empty", "record       1000 points (asked 1000)", "channel 2    range"}},
	} {
		t.Run(tc.kind, func(t *testing.T) {
			var out, errOut bytes.Buffer
			err := runProbe([]string{tc.addr, "--kind", tc.kind, "--ac", "--timeout", "5s"}, &out, &errOut)
			if err != nil {
				t.Fatalf("probe: %v\n%s", err, out.String())
			}
			for _, w := range tc.want {
				if !strings.Contains(out.String(), w) {
					t.Errorf("output lacks %q:\n%s", w, out.String())
				}
			}
		})
	}
	if srv.OutputOn() {
		t.Error("the simulated generator's output is on after probe")
	}
}

// The probe over a real serial device: socat links a pseudo-terminal to
// the simulated digitizer's socket, so go.bug.st/serial opens a device
// path and 80 kB binary blocks (with 0x0A bytes in them) cross a tty.
// Skipped only when socat is missing (CI installs it).
func TestProbeOverSerialToSimulator(t *testing.T) {
	bin, err := exec.LookPath("socat")
	if err != nil {
		t.Skip("socat not installed")
	}
	srv, err := sim.Start(sim.Options{Listen: "127.0.0.1:0"})
	if err != nil {
		t.Fatal(err)
	}
	defer srv.Close()
	link := filepath.Join(t.TempDir(), "tty")
	cmd := exec.Command(bin, "pty,raw,echo=0,link="+link, "tcp:"+srv.DigAddr())
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	defer func() {
		cmd.Process.Kill()
		cmd.Wait()
	}()
	for i := 0; ; i++ {
		if _, err := os.Stat(link); err == nil {
			break
		}
		if i > 100 {
			t.Fatal("socat made no pty")
		}
		time.Sleep(20 * time.Millisecond)
	}
	var out, errOut bytes.Buffer
	err = runProbe([]string{"serial://" + link + "?baud=115200", "--kind", "digitizer", "--points", "20000", "--ac", "--range", "20m"}, &out, &errOut)
	if err != nil {
		t.Fatalf("probe: %v\n%s", err, out.String())
	}
	for _, w := range []string{"record       20000 points (asked 20000)", "channel 1    range ±20 mV around 0 V AC", "error queue  empty"} {
		if !strings.Contains(out.String(), w) {
			t.Errorf("output lacks %q:\n%s", w, out.String())
		}
	}
}
