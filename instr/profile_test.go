package instr

import (
	"errors"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
)

// The generic profiles must be the SCPI-1999 command tree exactly as
// issue 3 lists it; the simulator implements the same list
// independently.
func TestBuiltinProfiles(t *testing.T) {
	g, err := BuiltinProfile("generator")
	if err != nil {
		t.Fatal(err)
	}
	if g.Name != "generic" || g.Kind != "generator" {
		t.Errorf("generator profile name %q kind %q", g.Name, g.Kind)
	}
	gp := g.Generator
	for _, c := range []struct{ got, want string }{
		{strings.Join(gp.Setup, ";"), "SOURce1:FUNCtion:SHAPe SINusoid"},
		{expand(gp.Frequency, "hz", num(1500)), "SOURce1:FREQuency 1500"},
		{gp.FrequencyQuery, "SOURce1:FREQuency?"},
		{expand(gp.Amplitude, "vpp", num(0.2)), "SOURce1:VOLTage 0.2"},
		{gp.AmplitudeQuery, "SOURce1:VOLTage?"},
		{expand(gp.Offset, "v", num(0)), "SOURce1:VOLTage:OFFSet 0"},
		{gp.OutputOn, "OUTPut1:STATe ON"},
		{gp.OutputOff, "OUTPut1:STATe OFF"},
		{gp.OutputQuery, "OUTPut1:STATe?"},
	} {
		if c.got != c.want {
			t.Errorf("generic generator: %q, want %q", c.got, c.want)
		}
	}
	d, err := BuiltinProfile("digitizer")
	if err != nil {
		t.Fatal(err)
	}
	dp := d.Digitizer
	for _, c := range []struct{ got, want string }{
		{strings.Join(dp.Setup, ";"), "FORMat:DATA REAL,32;FORMat:BORDer NORMal"},
		{expand(dp.Points, "n", "4096"), "SENSe:SWEep:POINts 4096"},
		{dp.PointsQuery, "SENSe:SWEep:POINts?"},
		{expand(dp.Interval, "s", num(1e-6)), "SENSe:SWEep:TINTerval 1E-06"},
		{dp.IntervalQuery, "SENSe:SWEep:TINTerval?"},
		{expand(dp.Range, "ch", "2", "v", num(0.5)), "SENSe2:VOLTage:RANGe 0.5"},
		{expand(dp.RangeQuery, "ch", "1"), "SENSe1:VOLTage:RANGe?"},
		{expand(dp.Offset, "ch", "1", "v", num(-2.5)), "SENSe1:VOLTage:OFFSet -2.5"},
		{expand(dp.CouplingAC, "ch", "2"), "INPut2:COUPling AC"},
		{expand(dp.CouplingDC, "ch", "1"), "INPut1:COUPling DC"},
		{strings.Join(dp.Start, ";"), "INITiate"},
		{dp.Done.Method, "opc"},
		{expand(dp.Fetch, "ch", "1"), "TRACe:DATA? CH1"},
		{dp.Data.Encoding.String(), "real32"},
	} {
		if c.got != c.want {
			t.Errorf("generic digitizer: %q, want %q", c.got, c.want)
		}
	}
	if dp.Data.LittleEndian || dp.RangeIs != "half" || !dp.SupportsAC() || !dp.SupportsOffset() {
		t.Errorf("generic digitizer: %+v", dp)
	}
	if _, err := BuiltinProfile("scope"); err == nil {
		t.Error("BuiltinProfile(scope): no error")
	}
}

// The shipped templates parse, and as they show the generic values they
// describe the same instrument as the built-in profiles.
func TestTemplatesMatchBuiltin(t *testing.T) {
	for _, kind := range []string{"generator", "digitizer"} {
		tp, err := LoadProfile(filepath.Join("..", "testdata", "profiles", "template-"+kind+".toml"))
		if err != nil {
			t.Fatal(err)
		}
		bp, err := BuiltinProfile(kind)
		if err != nil {
			t.Fatal(err)
		}
		if !reflect.DeepEqual(tp.Generator, bp.Generator) || !reflect.DeepEqual(tp.Digitizer, bp.Digitizer) {
			t.Errorf("template-%s.toml differs from the built-in profile:\n%+v\n%+v", kind, tp.Digitizer, bp.Digitizer)
		}
	}
}

func TestProfileErrors(t *testing.T) {
	gen := func(extra string) string {
		return `kind = "generator"
name = "x"
[generator]
frequency = "FREQ {hz}"
amplitude = "VOLT {vpp}"
output_on = "OUTP ON"
output_off = "OUTP OFF"
` + extra
	}
	dig := func(fetch, data string) string {
		return `kind = "digitizer"
name = "y"
[digitizer]
points = "POIN {n}"
interval = "TINT {s}"
range = "RANG{ch} {v}"
start = ["INIT"]
fetch = "` + fetch + `"
[digitizer.data]
` + data
	}
	tests := []struct {
		name, src string
		line      int
		key, msg  string
	}{
		{"unknown key", gen("frequncy_query = \"F?\"\n"), 8, "generator.frequncy_query", "unknown key"},
		{"unknown placeholder", gen("offset = \"OFFS {volts}\"\n"), 8, "generator.offset", "unknown placeholder {volts}"},
		{"placeholder not allowed here", gen("output_query = \"OUTP{ch}?\"\n"), 8, "generator.output_query", "unknown placeholder {ch}"},
		{"two amplitude units", strings.Replace(gen(""), "VOLT {vpp}", "VOLT {vpp} {vrms}", 1), 5, "generator.amplitude", "exactly one of"},
		{"frequency without hz", strings.Replace(gen(""), "FREQ {hz}", "FREQ 1000", 1), 4, "generator.frequency", "lacks the placeholder {hz}"},
		{"unclosed brace", strings.Replace(gen(""), "FREQ {hz}", "FREQ {hz", 1), 4, "generator.frequency", "unclosed"},
		{"missing output_off", strings.Replace(gen(""), "output_off = \"OUTP OFF\"\n", "", 1), 3, "generator.output_off", "missing"},
		{"missing kind", strings.Replace(gen(""), "kind = \"generator\"\n", "", 1), 0, "kind", "missing"},
		{"bad kind", strings.Replace(gen(""), `kind = "generator"`, `kind = "oscillator"`, 1), 1, "kind", "oscillator"},
		{"offset_v without offset", gen("offset_v = 1.0\n"), 8, "generator.offset_v", "no offset command"},
		{"undeclared format", dig("DATA? {ch}", ""), 9, "digitizer.data.format", "missing"},
		{"unknown format", dig("DATA? {ch}", "format = \"int12\"\n"), 10, "digitizer.data.format", "int12"},
		{"int16 without scale", dig("DATA? {ch}", "format = \"int16\"\n"), 9, "digitizer.data.scale", "needs scale"},
		{"byte order on ascii", dig("DATA? {ch}", "format = \"ascii\"\nbyte_order = \"big\"\n"), 11, "digitizer.data.byte_order", "means nothing"},
		{"fetch placeholder", dig("DATA? {channel}", "format = \"real32\"\n"), 8, "digitizer.fetch", "unknown placeholder {channel}"},
		{"unknown data key", dig("DATA? {ch}", "format = \"real32\"\nendian = \"big\"\n"), 11, "digitizer.data.endian", "unknown key"},
		{"wrong type", gen("max_vpp = \"big\"\n"), 8, "generator.max_vpp", "incompatible types"},
		{"interval and rate", strings.Replace(dig("D? {ch}", "format = \"real32\"\n"), "interval = \"TINT {s}\"", "interval = \"TINT {s}\"\nrate = \"SRAT {hz}\"", 1), 6, "digitizer.rate", "not both"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, err := ParseProfile("bench.toml", []byte(tc.src))
			var pe *ProfileError
			if !errors.As(err, &pe) {
				t.Fatalf("err = %v, want *ProfileError", err)
			}
			if pe.File != "bench.toml" || pe.Line != tc.line || pe.Key != tc.key || !strings.Contains(pe.Msg, tc.msg) {
				t.Errorf("got %s (line %d key %q), want line %d key %q containing %q", err, pe.Line, pe.Key, tc.line, tc.key, tc.msg)
			}
			if !strings.Contains(err.Error(), "bench.toml") {
				t.Errorf("error %q does not name the file", err)
			}
		})
	}
}

func TestProfileSyntaxErrorHasLine(t *testing.T) {
	_, err := ParseProfile("bad.toml", []byte("kind = \"generator\"\nname = \n"))
	var pe *ProfileError
	if !errors.As(err, &pe) || pe.Line != 2 || !strings.Contains(err.Error(), "bad.toml:2") {
		t.Fatalf("err = %v, want bad.toml:2", err)
	}
}

func TestLoadProfileMissingFile(t *testing.T) {
	p := filepath.Join(t.TempDir(), "none.toml")
	if _, err := LoadProfile(p); !errors.Is(err, os.ErrNotExist) || !strings.Contains(err.Error(), p) {
		t.Fatalf("err = %v", err)
	}
}

func TestNum(t *testing.T) {
	// Shortest round-trip decimal (strconv 'g', -1) with an upper-case
	// exponent, as IEEE 488.2 7.7.2 decimal numeric program data allows.
	for v, want := range map[float64]string{1000: "1000", 1e6: "1E+06", 1e-6: "1E-06", 0.25: "0.25", -2.5: "-2.5", 123456.789: "123456.789"} {
		if got := num(v); got != want {
			t.Errorf("num(%v) = %q, want %q", v, got, want)
		}
	}
}

func FuzzParseProfile(f *testing.F) {
	for _, name := range []string{"generic-generator.toml", "generic-digitizer.toml"} {
		b, err := builtin.ReadFile("profiles/" + name)
		if err != nil {
			f.Fatal(err)
		}
		f.Add(b)
	}
	f.Add([]byte("kind = \"generator\"\n[generator]\nfrequency = \"{\"\n"))
	f.Fuzz(func(t *testing.T, src []byte) {
		p, err := ParseProfile("fuzz.toml", src)
		if err != nil {
			var pe *ProfileError
			if !errors.As(err, &pe) {
				t.Fatalf("error %v is not a *ProfileError", err)
			}
			return
		}
		if (p.Generator == nil) == (p.Digitizer == nil) {
			t.Fatalf("profile of kind %q has generator %v digitizer %v", p.Kind, p.Generator != nil, p.Digitizer != nil)
		}
	})
}

// Every profile shipped under testdata/profiles parses.
func TestShippedProfilesParse(t *testing.T) {
	files, err := filepath.Glob(filepath.Join("..", "testdata", "profiles", "*.toml"))
	if err != nil || len(files) < 4 {
		t.Fatalf("found %d profiles, %v", len(files), err)
	}
	for _, f := range files {
		p, err := LoadProfile(f)
		if err != nil {
			t.Errorf("%v", err)
			continue
		}
		base := strings.TrimSuffix(filepath.Base(f), ".toml")
		if strings.HasPrefix(base, "example-") && p.Name != base {
			t.Errorf("%s: name %q, want %q", f, p.Name, base)
		}
	}
}
