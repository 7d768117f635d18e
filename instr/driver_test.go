package instr

import (
	"context"
	"errors"
	"math"
	"strings"
	"testing"
	"time"

	"loopsweep/instr/instrtest"
)

// Local copies of the interfaces package sweep declares (instr must not
// import sweep): the drivers must satisfy them.
type sweepGenerator interface {
	SetFrequency(ctx context.Context, hz float64) error
	SetAmplitude(ctx context.Context, vpp float64) error
	SetOutput(ctx context.Context, on bool) error
}

type sweepDigitizer interface {
	Configure(ctx context.Context, want CaptureSettings) (CaptureSettings, error)
	Capture(ctx context.Context, ch1, ch2 []float64) error
}

var (
	_ sweepGenerator = (*Generator)(nil)
	_ sweepDigitizer = (*Digitizer)(nil)
)

const noError = `+0,"No error"` + "\n"

func step(cmd string) instrtest.Step       { return instrtest.Step{Cmd: cmd} }
func ask(cmd, reply string) instrtest.Step { return instrtest.Step{Cmd: cmd, Reply: reply + "\n"} }
func errq() instrtest.Step                 { return instrtest.Step{Cmd: "SYSTem:ERRor?", Reply: noError} }
func errqReply(code int, text string) instrtest.Step {
	return instrtest.Step{Cmd: "SYSTem:ERRor?", Reply: itoaSigned(code) + `,"` + text + `"` + "\n"}
}

func builtinProfile(t *testing.T, kind string) *Profile {
	t.Helper()
	p, err := BuiltinProfile(kind)
	if err != nil {
		t.Fatal(err)
	}
	return p
}

func TestGeneratorGeneric(t *testing.T) {
	ctx := context.Background()
	s, _ := dial(t, time.Second,
		ask("*IDN?", "Acme Testworks,WG-1,0001,1.0"),
		step("*CLS"),
		step("OUTPut1:STATe OFF"),
		errq(),
		step("SOURce1:FUNCtion:SHAPe SINusoid"),
		step("SOURce1:VOLTage:OFFSet 0"),
		errq(),
		step("SOURce1:FREQuency 1000"),
		errq(),
		step("SOURce1:FREQuency 1.5E+06"),
		errq(),
		step("SOURce1:VOLTage 0.05"),
		errq(),
		ask("SOURce1:VOLTage?", "+5.0E-02"),
		step("OUTPut1:STATe ON"),
		errq(),
		ask("OUTPut1:STATe?", "1"),
		step("SOURce1:FREQuency 2E+07"),
		errqReply(-222, "Data out of range"),
		errq(),
		// Off must work even with a cancelled context.
		step("OUTPut1:STATe OFF"),
		errq(),
	)
	g, err := NewGenerator(s, builtinProfile(t, "generator"))
	if err != nil {
		t.Fatal(err)
	}
	if g.IDN() != "Acme Testworks,WG-1,0001,1.0" {
		t.Errorf("IDN %q", g.IDN())
	}
	if err := g.SetFrequency(ctx, 1000); err != nil {
		t.Fatal(err)
	}
	if err := g.SetFrequency(ctx, 1.5e6); err != nil {
		t.Fatal(err)
	}
	if err := g.SetAmplitude(ctx, 0.05); err != nil {
		t.Fatal(err)
	}
	if a, err := g.Amplitude(ctx); err != nil || a != 0.05 {
		t.Fatalf("Amplitude = %v, %v", a, err)
	}
	if err := g.SetOutput(ctx, true); err != nil {
		t.Fatal(err)
	}
	if on, err := g.Output(ctx); err != nil || !on {
		t.Fatalf("Output = %v, %v", on, err)
	}
	err = g.SetFrequency(ctx, 2e7)
	var ie *InstrumentError
	if !errors.As(err, &ie) || ie.Code != -222 || ie.Cmd != "SOURce1:FREQuency 2E+07" {
		t.Fatalf("err = %v, want instrument error -222 after the frequency command", err)
	}
	if !strings.Contains(err.Error(), "set frequency 2e+07 Hz") {
		t.Errorf("error %q does not name the setting", err)
	}
	cancelled, cancel := context.WithCancel(ctx)
	cancel()
	if err := g.SetOutput(cancelled, false); err != nil {
		t.Fatalf("output off with a cancelled context: %v", err)
	}
	// Refused before sending: nothing is in the script for these.
	if err := g.SetFrequency(ctx, -1); err == nil {
		t.Error("negative frequency accepted")
	}
	if err := g.SetAmplitude(ctx, math.NaN()); err == nil {
		t.Error("NaN amplitude accepted")
	}
}

func TestGeneratorUnitsAndLimit(t *testing.T) {
	src := `kind = "generator"
name = "rms"
[generator]
frequency = "FREQ {hz}"
amplitude = "AMPL {vrms}"
amplitude_query = "AMPL?"
output_on = "OUTP ON"
output_off = "OUTP OFF"
max_vpp = 1.0
check_errors = false
`
	p, err := ParseProfile("rms.toml", []byte(src))
	if err != nil {
		t.Fatal(err)
	}
	// A sine of 1 Vpp is √2/4 = 0.35355339059327376220 Vrms (closed form
	// Vrms = Vpp/(2√2)); the text sent is the float64 nearest to it
	// within one unit in the last place (5.6e-17), checked below.
	const sent = "0.35355339059327373"
	if v, _ := ParseNumber(sent); math.Abs(v-0.35355339059327376220) > 5.6e-17 {
		t.Fatalf("%s is not within 1 ulp of √2/4", sent)
	}
	s, _ := dial(t, time.Second,
		ask("*IDN?", "x"),
		step("OUTP OFF"),
		step("AMPL "+sent),
		ask("AMPL?", sent),
	)
	g, err := NewGenerator(s, p)
	if err != nil {
		t.Fatal(err)
	}
	if err := g.SetAmplitude(context.Background(), 1.0); err != nil {
		t.Fatal(err)
	}
	a, err := g.Amplitude(context.Background())
	if err != nil || math.Abs(a-1) > 1e-15 {
		t.Fatalf("Amplitude = %v, %v; want 1 Vpp", a, err)
	}
	if err := g.SetAmplitude(context.Background(), 1.01); err == nil || !strings.Contains(err.Error(), "max_vpp") {
		t.Fatalf("above max_vpp: %v", err)
	}
	if g.MaxVpp() != 1 {
		t.Errorf("MaxVpp = %v", g.MaxVpp())
	}
}

func TestDigitizerGeneric(t *testing.T) {
	ctx := context.Background()
	ch1 := []float64{0.5, -0.25, 0.125, 1}
	ch2 := []float64{-1, 2, -3, 4}
	s, _ := dial(t, time.Second,
		ask("*IDN?", "Acme Testworks,DG-2,42,0.9"),
		step("*CLS"),
		step("FORMat:DATA REAL,32"),
		step("FORMat:BORDer NORMal"),
		errq(),
		step("SENSe:SWEep:POINts 4"),
		step("SENSe:SWEep:TINTerval 1E-06"),
		step("INPut1:COUPling AC"),
		step("SENSe1:VOLTage:RANGe 0.1"),
		step("SENSe1:VOLTage:OFFSet 0"),
		step("INPut2:COUPling DC"),
		step("SENSe2:VOLTage:RANGe 0.2"),
		step("SENSe2:VOLTage:OFFSet 5"),
		ask("SENSe:SWEep:POINts?", "4"),
		// The instrument rounded the interval and the range.
		ask("SENSe:SWEep:TINTerval?", "1.024E-06"),
		ask("SENSe1:VOLTage:RANGe?", "0.125"),
		ask("SENSe1:VOLTage:OFFSet?", "0"),
		ask("SENSe2:VOLTage:RANGe?", "0.25"),
		ask("SENSe2:VOLTage:OFFSet?", "5.0"),
		errq(),
		step("INITiate"),
		ask("*OPC?", "1"),
		instrtest.Step{Cmd: "TRACe:DATA? CH1", Reply: instrtest.Block(instrtest.Real32(ch1, false))},
		instrtest.Step{Cmd: "TRACe:DATA? CH2", Reply: instrtest.Block(instrtest.Real32(ch2, false)), Chunk: 5},
		errq(),
	)
	d, err := NewDigitizer(s, builtinProfile(t, "digitizer"))
	if err != nil {
		t.Fatal(err)
	}
	if !d.SupportsAC() || !d.SupportsOffset() || d.MaxPoints() != 0 {
		t.Errorf("SupportsAC %v SupportsOffset %v MaxPoints %d", d.SupportsAC(), d.SupportsOffset(), d.MaxPoints())
	}
	want := CaptureSettings{Points: 4, IntervalS: 1e-6, Channels: [2]ChannelSettings{
		{RangeV: 0.1, AC: true},
		{RangeV: 0.2, OffsetV: 5},
	}}
	got, err := d.Configure(ctx, want)
	if err != nil {
		t.Fatal(err)
	}
	wantGot := CaptureSettings{Points: 4, IntervalS: 1.024e-6, Channels: [2]ChannelSettings{
		{RangeV: 0.125, AC: true},
		{RangeV: 0.25, OffsetV: 5},
	}}
	if got != wantGot {
		t.Errorf("Configure = %+v, want %+v", got, wantGot)
	}
	a, b := make([]float64, 4), make([]float64, 4)
	if err := d.Capture(ctx, a, b); err != nil {
		t.Fatal(err)
	}
	equal(t, "channel 1", a, ch1)
	equal(t, "channel 2", b, ch2)
	if err := d.Capture(ctx, make([]float64, 3), b); err == nil {
		t.Error("short buffer accepted")
	}
}

func TestDigitizerInt16PollPerDivision(t *testing.T) {
	src := `kind = "digitizer"
name = "scope"
[digitizer]
channels = ["CHAN1", "CHAN2"]
points = "ACQ:POIN {n}"
max_points = 1000
rate = "ACQ:SRAT {hz}"
rate_query = "ACQ:SRAT?"
range = "{ch}:SCAL {v}"
range_is = "per_division"
divisions = 8
start = ["SING"]
fetch = "WAV:DATA? {ch}"
check_errors = false
[digitizer.done]
method = "poll"
query = "ACQ:STAT?"
value = "STOP"
poll_ms = 5
[digitizer.data]
format = "int16"
byte_order = "little"
scale_query = "WAV:{ch}:YINC?"
offset = 0.0
`
	p, err := ParseProfile("scope.toml", []byte(src))
	if err != nil {
		t.Fatal(err)
	}
	codes := []int16{-32768, 0, 10, 32767}
	s, _ := dial(t, time.Second,
		ask("*IDN?", "x"),
		step("ACQ:POIN 4"),
		step("ACQ:SRAT 1E+06"),
		// ±1 V over 8 divisions is 0.25 V/div (closed form 2·1/8).
		step("CHAN1:SCAL 0.25"),
		step("CHAN2:SCAL 0.5"),
		ask("ACQ:SRAT?", "5E+05"),
		ask("WAV:CHAN1:YINC?", "3.0517578125E-05"),
		ask("WAV:CHAN2:YINC?", "6.103515625E-05"),
		step("SING"),
		ask("ACQ:STAT?", "RUN"),
		ask("ACQ:STAT?", "STOP"),
		instrtest.Step{Cmd: "WAV:DATA? CHAN1", Reply: instrtest.Block(instrtest.Int16(codes, true))},
		instrtest.Step{Cmd: "WAV:DATA? CHAN2", Reply: "#0" + string(instrtest.Int16(codes, true)) + "\n"},
	)
	d, err := NewDigitizer(s, p)
	if err != nil {
		t.Fatal(err)
	}
	if d.MaxPoints() != 1000 || d.SupportsAC() || d.SupportsOffset() {
		t.Errorf("MaxPoints %d SupportsAC %v SupportsOffset %v", d.MaxPoints(), d.SupportsAC(), d.SupportsOffset())
	}
	ctx := context.Background()
	if _, err := d.Configure(ctx, CaptureSettings{Points: 4, IntervalS: 1e-6, Channels: [2]ChannelSettings{{RangeV: 1, AC: true}, {RangeV: 1}}}); err == nil || !strings.Contains(err.Error(), "no coupling_ac") {
		t.Fatalf("AC on a profile without it: %v", err)
	}
	if _, err := d.Configure(ctx, CaptureSettings{Points: 4, IntervalS: 1e-6, Channels: [2]ChannelSettings{{RangeV: 1, OffsetV: 2}, {RangeV: 1}}}); err == nil || !strings.Contains(err.Error(), "no offset command") {
		t.Fatalf("offset on a profile without it: %v", err)
	}
	if _, err := d.Configure(ctx, CaptureSettings{Points: 1001, IntervalS: 1e-6, Channels: [2]ChannelSettings{{RangeV: 1}, {RangeV: 1}}}); err == nil || !strings.Contains(err.Error(), "maximum 1000") {
		t.Fatalf("too long a record: %v", err)
	}
	got, err := d.Configure(ctx, CaptureSettings{Points: 4, IntervalS: 1e-6, Channels: [2]ChannelSettings{{RangeV: 1}, {RangeV: 2}}})
	if err != nil {
		t.Fatal(err)
	}
	if got.IntervalS != 2e-6 || got.Channels[0].RangeV != 1 || got.Channels[1].RangeV != 2 {
		t.Errorf("Configure = %+v; want the rate read back as a 2 µs interval", got)
	}
	a, b := make([]float64, 4), make([]float64, 4)
	if err := d.Capture(ctx, a, b); err != nil {
		t.Fatal(err)
	}
	// volts = code × scale: 2^-15 and 2^-14 V per code (exact in binary).
	for i, c := range codes {
		if a[i] != float64(c)/32768 || b[i] != float64(c)/16384 {
			t.Errorf("[%d] = %v, %v; want %v, %v", i, a[i], b[i], float64(c)/32768, float64(c)/16384)
		}
	}
}

func TestDigitizerCaptureTimeout(t *testing.T) {
	s, srv := dial(t, 150*time.Millisecond,
		ask("*IDN?", "x"),
		step("*CLS"),
		step("FORMat:DATA REAL,32"),
		step("FORMat:BORDer NORMal"),
		errq(),
		step("SENSe:SWEep:POINts 2"),
		step("SENSe:SWEep:TINTerval 1E-06"),
		step("INPut1:COUPling DC"),
		step("SENSe1:VOLTage:RANGe 1"),
		step("SENSe1:VOLTage:OFFSet 0"),
		step("INPut2:COUPling DC"),
		step("SENSe2:VOLTage:RANGe 1"),
		step("SENSe2:VOLTage:OFFSet 0"),
		ask("SENSe:SWEep:POINts?", "2"),
		ask("SENSe:SWEep:TINTerval?", "1E-06"),
		ask("SENSe1:VOLTage:RANGe?", "1"),
		ask("SENSe1:VOLTage:OFFSet?", "0"),
		ask("SENSe2:VOLTage:RANGe?", "1"),
		ask("SENSe2:VOLTage:OFFSet?", "0"),
		errq(),
		step("INITiate"),
		instrtest.Step{Cmd: "*OPC?", Hang: true},
	)
	d, err := NewDigitizer(s, builtinProfile(t, "digitizer"))
	if err != nil {
		t.Fatal(err)
	}
	if _, err := d.Configure(context.Background(), CaptureSettings{Points: 2, IntervalS: 1e-6, Channels: [2]ChannelSettings{{RangeV: 1}, {RangeV: 1}}}); err != nil {
		t.Fatal(err)
	}
	err = d.Capture(context.Background(), make([]float64, 2), make([]float64, 2))
	if !errors.Is(err, ErrTimeout) || !strings.Contains(err.Error(), "*OPC?") || !strings.Contains(err.Error(), srv.Addr()) {
		t.Fatalf("err = %v, want a timeout naming *OPC? and %s", err, srv.Addr())
	}
}
