package sweep

import (
	"bytes"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"math"
	"math/cmplx"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"pgregory.net/rapid"

	"loopsweep/analysis"
)

var update = flag.Bool("update", false, "rewrite the example sessions in ../testdata/sessions from their closed-form loops")

// sessionsDir holds the example sessions shared by the sweep and cmd
// tests; csvDir the example CSV files.
const (
	sessionsDir = "../testdata/sessions"
	csvDir      = "../testdata/csv"
)

// exampleLoop is an invented bench scenario whose loop gain has a closed
// form, so the example session built from it has known margins.
type exampleLoop struct {
	file     string // base name under testdata/sessions
	op       string // operating-point label
	note     string
	L        func(s complex128) complex128 // loop gain, s in rad/s
	start    float64                       // Hz
	stop     float64                       // Hz
	ppd      int
	noiseV   float64 // assumed rms noise on each channel, V, for the uncertainty model
	minimal  bool    // write only the required fields (tolerant-loader fixture)
	complete bool
}

const twoPi = 2 * math.Pi

// thirdOrder is K/(1+s/ωp)^3 with ωp = 2π·fp: its phase crossover is at
// ω = √3·ωp where |L| = K/8, so GM = 8/K (REFERENCES.md, closed form).
func thirdOrder(k, fp float64) func(complex128) complex128 {
	return func(s complex128) complex128 {
		d := 1 + s/complex(twoPi*fp, 0)
		return complex(k, 0) / (d * d * d)
	}
}

// secondOrder is ωn²/(s(s+2ζωn)) with ωn = 2π·fn (REFERENCES.md: Ogata;
// Franklin, Powell & Emami-Naeini).
func secondOrder(zeta, fn float64) func(complex128) complex128 {
	wn := twoPi * fn
	return func(s complex128) complex128 {
		return complex(wn*wn, 0) / (s * (s + complex(2*zeta*wn, 0)))
	}
}

// integratorTwoPoles is K/(s(s+1)(s+2)) with s in units of ω0 = 2π·f0:
// phase crossover at ω = √2·ω0 where |L| = K/6, so GM = 6/K
// (REFERENCES.md, closed form).
func integratorTwoPoles(k, f0 float64) func(complex128) complex128 {
	return func(s complex128) complex128 {
		u := s / complex(twoPi*f0, 0)
		return complex(k, 0) / (u * (u + 1) * (u + 2))
	}
}

// exampleLoops are the scenarios behind testdata/sessions. The bench
// stories are invented; the numbers come from the closed forms.
var exampleLoops = []exampleLoop{
	{file: "bench-supply-light-load.json", op: "bench supply, 12 V in, 5 V out, 0.2 A",
		note: "third-order example loop K=2, fp=1 kHz: GM = 8/K = 4 (12.04 dB) at √3·fp",
		L:    thirdOrder(2, 1000), start: 10, stop: 100e3, ppd: 10, noiseV: 20e-6, complete: true},
	{file: "bench-supply-heavy-load.json", op: "bench supply, 12 V in, 5 V out, 3 A",
		note: "third-order example loop K=4, fp=1 kHz: GM = 8/K = 2 (6.02 dB) at √3·fp",
		L:    thirdOrder(4, 1000), start: 10, stop: 100e3, ppd: 10, noiseV: 20e-6, complete: true},
	{file: "motor-current-loop.json", op: "motor drive current loop, 48 V bus, standstill",
		note: "second-order example loop ζ=0.6, fn=2 kHz: no phase crossover",
		L:    secondOrder(0.6, 2000), start: 20, stop: 200e3, ppd: 10, noiseV: 50e-6, complete: true},
	{file: "charger-voltage-loop.json", op: "battery charger voltage loop, 3.6 V cell",
		note: "integrator with two poles K=3, f0=500 Hz: GM = 6/K = 2 (6.02 dB) at √2·f0",
		L:    integratorTwoPoles(3, 500), start: 10, stop: 50e3, ppd: 10, noiseV: 20e-6, complete: true},
	{file: "minimal-fields.json", op: "",
		L: thirdOrder(2, 1000), start: 10, stop: 100e3, ppd: 10, minimal: true},
}

// logGrid returns ppd points per decade from start to stop, both included.
func logGrid(start, stop float64, ppd int) []float64 {
	n := int(math.Round(math.Log10(stop/start) * float64(ppd)))
	fs := make([]float64, n+1)
	for k := range fs {
		fs[k] = start * math.Pow(10, math.Log10(stop/start)*float64(k)/float64(n))
	}
	fs[n] = stop
	return fs
}

func wrap180(deg float64) float64 {
	d := math.Mod(deg, 360)
	if d > 180 {
		d -= 360
	}
	if d <= -180 {
		d += 360
	}
	return d
}

// buildSession makes the session a noiseless bench would record for the
// loop: ch1 (injection side) at 10 mV peak, ch2 = −L·ch1. Uncertainties
// follow an assumed model, not a measurement: per channel SNR from
// noiseV over a record of the given cycles, relative uncertainty
// σ = sqrt(1/snr1 + 1/snr2)/sqrt(cycles) as a ratio, σ_gain = 8.686·σ dB
// and σ_phase = 57.3·σ°. A point whose ch2 SNR is below 20 dB gets a first
// attempt with 10 cycles marked as a problem and a retry with 40 cycles,
// so the example files show a history of attempts.
func buildSession(e exampleLoop) *Session {
	t0 := time.Date(2026, 3, 14, 9, 30, 0, 0, time.UTC)
	// Settings spelled out (not Defaults()) so the example files do not
	// change when the defaults are tuned.
	st := Settings{
		StartHz: e.start, StopHz: e.stop, PerDecade: e.ppd, Measure: MeasureLoop,
		AmpVpp: 0.02, MaxAmpVpp: 0.1, TargetSNRdB: 40, MaxHarmonicDB: -30,
		SettleCycles: 10, SettleMin: 10 * time.Millisecond, Cycles: 10, MinPerCycle: 20,
		MinSNRdB: 20, MaxAttempts: 3, RefinePMDeg: 0.5, RefineGMDB: 0.2, RefineBudget: 8,
	}
	s := &Session{
		Schema: SchemaVersion, ToolVersion: "0.1.0", Created: t0,
		OperatingPoint: e.op, Settings: st, Complete: e.complete,
		Instruments: Instruments{
			GeneratorIDN: "EXAMPLE INSTRUMENTS,SG-1,0001,1.0", DigitizerIDN: "EXAMPLE INSTRUMENTS,DQ-2,0002,1.0",
			GeneratorAddr: "TCPIP::127.0.0.1::5025::SOCKET", DigitizerAddr: "TCPIP::127.0.0.1::5026::SOCKET",
			GeneratorProfile: "generic-scpi", DigitizerProfile: "generic-scpi",
		},
	}
	if e.note != "" {
		s.Notes = []Note{{At: t0, Text: e.note}}
	}
	const ampV = 0.01
	now := t0
	for _, f := range logGrid(e.start, e.stop, e.ppd) {
		L := e.L(complex(0, twoPi*f))
		g, ph := polarDB(L)
		p := Point{FreqHz: f, Chosen: -1}
		attempt := func(cycles float64, reason string) Attempt {
			a2 := ampV * cmplx.Abs(L)
			snr := func(a float64) float64 { return (a * a / 2) / (e.noiseV * e.noiseV) }
			s1, s2 := snr(ampV), snr(a2)
			rel := math.Sqrt(1/s1+1/s2) / math.Sqrt(cycles)
			started := now
			dur := time.Duration((10 + cycles) / f * float64(time.Second))
			now = now.Add(dur + 50*time.Millisecond)
			dt := 1 / (f * 50)
			return Attempt{
				Started: started, Finished: now, AmpVpp: 2 * ampV,
				IntervalS: dt, RecordLength: int(math.Round(cycles * 50)), Cycles: cycles,
				Ch1: ChannelReading{AmpPeakV: ampV, SNRdB: 10 * math.Log10(s1*cycles*25), NoiseV: e.noiseV, RangeV: 0.05},
				Ch2: ChannelReading{AmpPeakV: a2, PhaseDeg: wrap180(ph + 180), SNRdB: 10 * math.Log10(s2*cycles*25), NoiseV: e.noiseV, RangeV: 0.05},
				Re:  real(L), Im: imag(L), GainDB: g, PhaseDeg: ph,
				GainSigmaDB: 20 / math.Ln10 * rel, PhaseSigmaDeg: 180 / math.Pi * rel,
				Reason: reason,
			}
		}
		first := attempt(10, "plan")
		p.Attempts = append(p.Attempts, first)
		if first.Ch2.SNRdB < 20+10*math.Log10(10*25) {
			p.Attempts[0].Problem = "ch2 snr below min_snr_db"
			p.Attempts = append(p.Attempts, attempt(40, "retry"))
			if r := p.Attempts[1]; r.Ch2.SNRdB < 20+10*math.Log10(40*25) {
				p.Attempts[1].Problem = "ch2 snr below min_snr_db"
				p.Flagged, p.Flag = true, "ch2 snr below min_snr_db after 2 attempts"
			}
		}
		s.Points = append(s.Points, p)
	}
	s.Updated = now
	return s
}

// minimalJSON keeps only the fields a schema-1 reader must have: schema,
// and per point freq_hz and each attempt's gain_db and phase_deg.
func minimalJSON(s *Session) []byte {
	type att struct {
		GainDB   float64 `json:"gain_db"`
		PhaseDeg float64 `json:"phase_deg"`
	}
	type pt struct {
		FreqHz   float64 `json:"freq_hz"`
		Attempts []att   `json:"attempts"`
	}
	out := struct {
		Schema int  `json:"schema"`
		Points []pt `json:"points"`
	}{Schema: SchemaVersion}
	for _, p := range s.Points {
		a := p.Attempts[len(p.Attempts)-1]
		out.Points = append(out.Points, pt{FreqHz: p.FreqHz, Attempts: []att{{a.GainDB, a.PhaseDeg}}})
	}
	b, err := json.MarshalIndent(out, "", "  ")
	if err != nil {
		panic(err)
	}
	return append(b, '\n')
}

func exampleJSON(e exampleLoop) []byte {
	s := buildSession(e)
	if e.minimal {
		return minimalJSON(s)
	}
	b, err := json.MarshalIndent(s, "", "  ")
	if err != nil {
		panic(err)
	}
	return append(b, '\n')
}

// TestExampleSessions checks that the committed example sessions are what
// their closed-form loops give (go test ./sweep -run TestExampleSessions
// -update rewrites them) and the example CSV made from one of them.
func TestExampleSessions(t *testing.T) {
	for _, e := range exampleLoops {
		path := filepath.Join(sessionsDir, e.file)
		want := exampleJSON(e)
		if *update {
			if err := os.WriteFile(path, want, 0o644); err != nil {
				t.Fatal(err)
			}
		}
		got, err := os.ReadFile(path)
		if err != nil {
			t.Fatalf("%v (run with -update to create it)", err)
		}
		if !bytes.Equal(got, want) {
			t.Errorf("%s differs from its closed-form loop; run go test ./sweep -run TestExampleSessions -update", path)
		}
	}
	// The CSV example: the heavy-load session's points, with a comment
	// header, as a user might export them from another tool.
	s := buildSession(exampleLoops[1])
	var b bytes.Buffer
	b.WriteString("# loop gain of the heavy-load example (third-order loop K=4, fp=1 kHz)\r\n")
	if err := WriteCSV(&b, s); err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(csvDir, "bench-supply-heavy-load.csv")
	if *update {
		if err := os.WriteFile(path, b.Bytes(), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	got, err := os.ReadFile(path)
	if err != nil {
		t.Fatalf("%v (run with -update to create it)", err)
	}
	if !bytes.Equal(got, b.Bytes()) {
		t.Errorf("%s differs from its closed-form loop; run with -update", path)
	}
}

func TestLoadSessionExamples(t *testing.T) {
	for _, e := range exampleLoops {
		t.Run(e.file, func(t *testing.T) {
			s, err := LoadSession(filepath.Join(sessionsDir, e.file))
			if err != nil {
				t.Fatal(err)
			}
			if s.Schema != SchemaVersion || s.OperatingPoint != e.op {
				t.Errorf("schema %d, operating point %q; want %d, %q", s.Schema, s.OperatingPoint, SchemaVersion, e.op)
			}
			fs := logGrid(e.start, e.stop, e.ppd)
			if len(s.Points) != len(fs) {
				t.Fatalf("%d points, want %d", len(s.Points), len(fs))
			}
			// Each chosen attempt is the closed form at its frequency:
			// the gain to 1e-9 dB and the complex value to 1e-12
			// relative (float64 rounding through the JSON text).
			for i, p := range s.Points {
				L := e.L(complex(0, twoPi*p.FreqHz))
				a, _ := s.Chosen(i)
				if d := math.Abs(a.GainDB - 20*math.Log10(cmplx.Abs(L))); d > 1e-9 {
					t.Errorf("point %d: gain off by %g dB", i, d)
				}
				if d := cmplx.Abs(complex(a.Re, a.Im)-L) / cmplx.Abs(L); d > 1e-12 {
					t.Errorf("point %d: re/im off by %g relative", i, d)
				}
				// The retry has 4x the cycles, so the smaller uncertainty:
				// it is the best attempt; a problem remains only on
				// flagged points.
				if a != p.Attempts[len(p.Attempts)-1] || (a.Problem != "") != p.Flagged {
					t.Errorf("point %d: chosen attempt %+v, flagged %v", i, a, p.Flagged)
				}
			}
		})
	}
}

// TestMinimalFields: a schema-1 file that carries only the required
// fields (no chosen, no re/im, no settings, instruments or uncertainty)
// loads, with chosen −1 and re/im derived from gain and phase.
func TestMinimalFields(t *testing.T) {
	s, err := LoadSession(filepath.Join(sessionsDir, "minimal-fields.json"))
	if err != nil {
		t.Fatal(err)
	}
	L := thirdOrder(2, 1000)
	for i, p := range s.Points {
		if p.Chosen != -1 {
			t.Errorf("point %d: chosen %d, want -1 for a missing field", i, p.Chosen)
		}
		a := p.Attempts[0]
		want := L(complex(0, twoPi*p.FreqHz))
		if d := cmplx.Abs(complex(a.Re, a.Im)-want) / cmplx.Abs(want); d > 1e-12 {
			t.Errorf("point %d: re/im %v derived from gain/phase, closed form %v", i, complex(a.Re, a.Im), want)
		}
	}
	// The reverse: only re/im given.
	doc := `{"schema":1,"points":[{"freq_hz":100,"attempts":[{"re":0,"im":-0.5}]}]}`
	s, err = ParseSession([]byte(doc), "reim.json")
	if err != nil {
		t.Fatal(err)
	}
	a := s.Points[0].Attempts[0]
	// |−0.5j| = 0.5 → 20·log10(0.5) = −6.0206 dB, angle −90° (arithmetic).
	if math.Abs(a.GainDB-20*math.Log10(0.5)) > 1e-12 || math.Abs(a.PhaseDeg+90) > 1e-12 {
		t.Errorf("gain %g dB phase %g°, want -6.0206 dB, -90°", a.GainDB, a.PhaseDeg)
	}
}

// Margins of the example sessions against the closed forms: third-order
// loop GM = 8/K at √3·fp, K/(s(s+1)(s+2)) GM = 6/K at √2·f0, second-order
// loop PM = atan(2ζωn/ωc) with ωc = ωn·sqrt(sqrt(1+4ζ⁴)−2ζ²)
// (REFERENCES.md; Ogata). Tolerances are the analysis package's accuracy
// target at 10 points per decade (issue 2): 0.1° and 0.05 dB; crossover
// frequencies to 1%.
func TestExampleMargins(t *testing.T) {
	const pmTol, gmTol, fTol = 0.1, 0.05, 0.01
	zeta, fn := 0.6, 2000.0
	wcOverWn := math.Sqrt(math.Sqrt(1+4*math.Pow(zeta, 4)) - 2*zeta*zeta)
	pm2 := math.Atan(2*zeta/wcOverWn) * 180 / math.Pi
	// Gain crossover of K/(1+u)^3: (1+u²)^(3/2) = K → u = sqrt(K^(2/3)−1),
	// PM = 180° − 3·atan(u) (arithmetic on the closed form).
	third := func(k float64) (fc, pm float64) {
		u := math.Sqrt(math.Pow(k, 2.0/3) - 1)
		return 1000 * u, 180 - 3*math.Atan(u)*180/math.Pi
	}
	fcA, pmA := third(2)
	fcB, pmB := third(4)
	cases := []struct {
		file         string
		fc, pm       float64
		fg, gm       float64 // fg 0: no phase crossover in the band
		wantGainOnly bool
	}{
		{"bench-supply-light-load.json", fcA, pmA, math.Sqrt(3) * 1000, 20 * math.Log10(8.0/2), false},
		{"bench-supply-heavy-load.json", fcB, pmB, math.Sqrt(3) * 1000, 20 * math.Log10(8.0/4), false},
		{"motor-current-loop.json", fn * wcOverWn, pm2, 0, 0, true},
		{"charger-voltage-loop.json", 0, 0, math.Sqrt(2) * 500, 20 * math.Log10(6.0/3), false},
		{"minimal-fields.json", fcA, pmA, math.Sqrt(3) * 1000, 20 * math.Log10(8.0/2), false},
	}
	for _, c := range cases {
		t.Run(c.file, func(t *testing.T) {
			s, err := LoadSession(filepath.Join(sessionsDir, c.file))
			if err != nil {
				t.Fatal(err)
			}
			m, err := analysis.ComputeMargins(s.Curve())
			if err != nil {
				t.Fatal(err)
			}
			if c.fc > 0 {
				if len(m.GainCrossovers) != 1 {
					t.Fatalf("%d gain crossovers, want 1", len(m.GainCrossovers))
				}
				g := m.GainCrossovers[0]
				if math.Abs(g.FreqHz-c.fc)/c.fc > fTol || math.Abs(g.PhaseMarginDeg-c.pm) > pmTol {
					t.Errorf("crossover %g Hz PM %g°; closed form %g Hz %g°", g.FreqHz, g.PhaseMarginDeg, c.fc, c.pm)
				}
			}
			if c.fg > 0 {
				if len(m.PhaseCrossovers) != 1 {
					t.Fatalf("%d phase crossovers, want 1", len(m.PhaseCrossovers))
				}
				p := m.PhaseCrossovers[0]
				if math.Abs(p.FreqHz-c.fg)/c.fg > fTol || math.Abs(p.GainMarginDB-c.gm) > gmTol {
					t.Errorf("phase crossover %g Hz GM %g dB; closed form %g Hz %g dB", p.FreqHz, p.GainMarginDB, c.fg, c.gm)
				}
			}
			if c.wantGainOnly && len(m.PhaseCrossovers) != 0 {
				t.Errorf("%d phase crossovers; the second-order loop has none", len(m.PhaseCrossovers))
			}
		})
	}
}

func TestLoadSessionErrors(t *testing.T) {
	good, err := os.ReadFile(filepath.Join(sessionsDir, "bench-supply-light-load.json"))
	if err != nil {
		t.Fatal(err)
	}
	half := len(good) / 2
	// A corrupt byte on a known line: replace the first digit after the
	// 40th line break with a letter.
	corrupt := append([]byte(nil), good...)
	nl, at := 0, -1
	for i, c := range corrupt {
		if c == '\n' {
			nl++
		}
		if nl >= 40 && c >= '0' && c <= '9' {
			at = i
			break
		}
	}
	if at < 0 {
		t.Fatal("example too short for the corrupt case")
	}
	corrupt[at] = 'x'
	cases := []struct {
		name    string
		data    []byte
		is      error // errors.Is target, or nil
		line    int   // FileError line, 0 for none expected
		contain string
	}{
		{"truncated", good[:half], nil, bytes.Count(good[:half], []byte{'\n'}) + 1, "truncated"},
		{"corrupt", corrupt, nil, bytes.Count(corrupt[:at], []byte{'\n'}) + 1, "invalid character"},
		{"empty", nil, ErrNotSession, 0, "JSON object"},
		{"csv", []byte("frequency_hz,gain_db,phase_deg\n1,2,3\n"), ErrNotSession, 0, ""},
		{"array", []byte(`[{"schema":1}]`), ErrNotSession, 0, ""},
		{"other json", []byte(`{"name":"x","values":[1,2]}`), ErrNotSession, 0, "schema"},
		{"no schema", []byte(`{"points":[]}`), ErrSchema, 0, "no \"schema\""},
		{"schema 2", []byte(`{"schema":2,"points":[]}`), ErrSchema, 0, "schema 2 is newer"},
		{"schema 0", []byte(`{"schema":0,"points":[]}`), ErrSchema, 0, "schema 0"},
		{"schema string", []byte("{\n\"schema\":\"1\"}"), nil, 2, "schema"},
		{"bad freq", []byte(`{"schema":1,"points":[{"freq_hz":-5,"attempts":[]}]}`), nil, 1, "point 1 (-5 Hz)"},
		{"bad freq on line 4", []byte("{\"schema\": 1, \"notes\": [{\"text\": \"a\"}],\n\"points\": [\n {\"freq_hz\": 5},\n {\"freq_hz\": 0}\n]}"), nil, 4, "point 2 (0 Hz)"},
		{"bad chosen", []byte(`{"schema":1,"points":[{"freq_hz":5,"chosen":1,"attempts":[{"gain_db":1,"phase_deg":2}]}]}`), nil, 0, "chosen 1"},
		{"empty attempt", []byte(`{"schema":1,"points":[{"freq_hz":5,"attempts":[{}]}]}`), nil, 0, "attempt 1 has neither"},
		{"negative sigma", []byte(`{"schema":1,"points":[{"freq_hz":5,"attempts":[{"gain_db":1,"phase_deg":2,"gain_sigma_db":-1}]}]}`), nil, 0, "negative"},
		{"huge number", []byte(`{"schema":1,"points":[{"freq_hz":1e999}]}`), nil, 1, "freq_hz"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			path := filepath.Join(t.TempDir(), "in.json")
			if err := os.WriteFile(path, c.data, 0o644); err != nil {
				t.Fatal(err)
			}
			_, err := LoadSession(path)
			if err == nil {
				t.Fatal("no error")
			}
			if !strings.Contains(err.Error(), path) {
				t.Errorf("error %q does not name the file", err)
			}
			if c.is != nil && !errors.Is(err, c.is) {
				t.Errorf("error %q is not %v", err, c.is)
			}
			if !strings.Contains(err.Error(), c.contain) {
				t.Errorf("error %q does not say %q", err, c.contain)
			}
			var fe *FileError
			if c.line > 0 && (!errors.As(err, &fe) || fe.Line != c.line || fe.Offset < 0) {
				t.Errorf("error %q: want line %d with a byte offset", err, c.line)
			}
		})
	}
	if _, err := LoadSession(filepath.Join(t.TempDir(), "absent.json")); err == nil || !strings.Contains(err.Error(), "absent.json") {
		t.Errorf("missing file: %v", err)
	}
}

func TestCSVRoundTripExamples(t *testing.T) {
	for _, e := range exampleLoops {
		s, err := LoadSession(filepath.Join(sessionsDir, e.file))
		if err != nil {
			t.Fatal(err)
		}
		var b bytes.Buffer
		if err := WriteCSV(&b, s); err != nil {
			t.Fatal(err)
		}
		got, err := ReadCSV(&b, e.file+".csv")
		if err != nil {
			t.Fatal(err)
		}
		want := s.Curve()
		if len(got) != len(want) {
			t.Fatalf("%s: %d points back, want %d", e.file, len(got), len(want))
		}
		for i := range got {
			if got[i] != want[i] {
				t.Errorf("%s point %d: %+v back, want %+v", e.file, i, got[i], want[i])
			}
		}
	}
}

// Property: any session's measured points survive WriteCSV then ReadCSV
// exactly (the encoding/csv FuzzRoundtrip idea, with rapid).
func TestCSVRoundTripProperty(t *testing.T) {
	rapid.Check(t, func(rt *rapid.T) {
		n := rapid.IntRange(1, 30).Draw(rt, "n")
		s := &Session{Schema: SchemaVersion}
		f := rapid.Float64Range(1e-3, 1e3).Draw(rt, "f0")
		for i := 0; i < n; i++ {
			f *= 1 + rapid.Float64Range(1e-6, 2).Draw(rt, "step")
			na := rapid.IntRange(0, 3).Draw(rt, "attempts")
			p := Point{FreqHz: f, Chosen: -1, Flagged: rapid.Bool().Draw(rt, "flagged"),
				Flag: rapid.StringMatching(`[a-z ,"]{0,12}`).Draw(rt, "flag")}
			for j := 0; j < na; j++ {
				p.Attempts = append(p.Attempts, Attempt{
					GainDB:        rapid.Float64Range(-200, 200).Draw(rt, "g"),
					PhaseDeg:      rapid.Float64Range(-179.999, 180).Draw(rt, "ph"),
					GainSigmaDB:   rapid.Float64Range(0, 10).Draw(rt, "gs"),
					PhaseSigmaDeg: rapid.Float64Range(0, 10).Draw(rt, "ps"),
				})
			}
			s.Points = append(s.Points, p)
		}
		var b bytes.Buffer
		if err := WriteCSV(&b, s); err != nil {
			rt.Fatal(err)
		}
		want := s.Curve()
		if len(want) == 0 {
			return
		}
		got, err := ReadCSV(&b, "prop.csv")
		if err != nil {
			rt.Fatalf("%v\n%s", err, b.String())
		}
		if len(got) != len(want) {
			rt.Fatalf("%d points back, want %d", len(got), len(want))
		}
		for i := range got {
			if got[i] != want[i] {
				rt.Fatalf("point %d: %+v back, want %+v", i, got[i], want[i])
			}
		}
	})
}

// RFC 4180 §2: fields with commas or quotes are quoted, quotes doubled,
// records end in CRLF.
func TestWriteCSVFormat(t *testing.T) {
	s := &Session{Points: []Point{{FreqHz: 1000, Chosen: -1, Flagged: true, Flag: `noisy, "ch2"`,
		Attempts: []Attempt{{GainDB: -3, PhaseDeg: -45, Re: 0.5, Im: -0.5}}}}}
	var b bytes.Buffer
	if err := WriteCSV(&b, s); err != nil {
		t.Fatal(err)
	}
	want := strings.Join(CSVColumns, ",") + "\r\n" +
		`1000,-3,-45,0,0,0.5,-0.5,0,0,0,0,true,"noisy, ""ch2""",1,1` + "\r\n"
	if b.String() != want {
		t.Errorf("got\n%q\nwant\n%q", b.String(), want)
	}
}

func TestReadCSV(t *testing.T) {
	in := "\xef\xbb\xbf# exported from a circuit simulator\n" +
		"Phase_Deg, frequency_hz ,gain_db,note,phase_sigma_deg\n" +
		"\n" +
		"-90,10,20,a,0.5\n" +
		"# a comment between rows\n" +
		"-170,100,0,\"b, c\",\n" +
		"170,1000,-20,d,1\n"
	pts, err := ReadCSV(strings.NewReader(in), "sim.csv")
	if err != nil {
		t.Fatal(err)
	}
	// The jump from −170° to +170° unwraps to −190° (analysis.UnwrapDeg:
	// steps are taken as the smaller of the two ways round).
	want := []analysis.Point{
		{FreqHz: 10, GainDB: 20, PhaseDeg: -90, PhaseSigmaDeg: 0.5},
		{FreqHz: 100, GainDB: 0, PhaseDeg: -170},
		{FreqHz: 1000, GainDB: -20, PhaseDeg: -190, PhaseSigmaDeg: 1},
	}
	if len(pts) != len(want) {
		t.Fatalf("%d points, want %d", len(pts), len(want))
	}
	for i := range want {
		if pts[i] != want[i] {
			t.Errorf("row %d: %+v, want %+v", i, pts[i], want[i])
		}
	}
}

func TestReadCSVErrors(t *testing.T) {
	cases := []struct {
		name, in string
		line     int
		is       error
		contain  string
	}{
		{"empty", "", 0, ErrNotCSV, "no header"},
		{"comments only", "# nothing\n", 0, ErrNotCSV, "no header"},
		{"no phase", "frequency_hz,gain_db\n1,2\n", 1, ErrNotCSV, "phase_deg"},
		{"json", `{"schema":1}`, 1, ErrNotCSV, ""},
		{"no rows", "frequency_hz,gain_db,phase_deg\n# none\n", 0, nil, "no data rows"},
		{"bad number", "# c\nfrequency_hz,gain_db,phase_deg\n1,2,3\n2,x,3\n", 4, nil, `gain_db: "x"`},
		{"nan", "frequency_hz,gain_db,phase_deg\n1,NaN,3\n", 2, nil, "finite"},
		{"zero freq", "frequency_hz,gain_db,phase_deg\n0,1,3\n", 2, nil, "positive"},
		{"descending", "frequency_hz,gain_db,phase_deg\n10,1,3\n5,1,3\n", 3, nil, "ascend"},
		{"short row", "frequency_hz,gain_db,phase_deg\n10,1\n", 2, nil, "2 fields"},
		{"bad quote", "frequency_hz,gain_db,phase_deg\n10,\"1,3\n", 2, nil, "quote"},
		{"dup column", "frequency_hz,gain_db,phase_deg,GAIN_DB\n", 1, nil, "twice"},
		{"negative sigma", "frequency_hz,gain_db,phase_deg,gain_sigma_db\n1,1,1,-1\n", 2, nil, "negative"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, err := ReadCSV(strings.NewReader(c.in), "data.csv")
			if err == nil {
				t.Fatal("no error")
			}
			var fe *FileError
			if !errors.As(err, &fe) || fe.File != "data.csv" || fe.Line != c.line {
				t.Errorf("error %q: want a FileError for data.csv line %d", err, c.line)
			}
			if c.is != nil && !errors.Is(err, c.is) {
				t.Errorf("error %q is not %v", err, c.is)
			}
			if !strings.Contains(err.Error(), c.contain) || !strings.HasPrefix(err.Error(), "data.csv") {
				t.Errorf("error %q: want it to start with the file and say %q", err, c.contain)
			}
		})
	}
}

// FuzzParseSession: no input panics; what parses survives a JSON round
// trip unchanged.
func FuzzParseSession(f *testing.F) {
	f.Add([]byte(`{"schema":1,"points":[{"freq_hz":100,"attempts":[{"gain_db":3,"phase_deg":-120}]}]}`))
	f.Add([]byte(`{"schema":1,"points":[{"freq_hz":100,"chosen":0,"attempts":[{"re":1,"im":-1}]}]}`))
	f.Add([]byte(`{"schema":2}`))
	f.Fuzz(func(t *testing.T, data []byte) {
		s, err := ParseSession(data, "fuzz.json")
		if err != nil {
			if !strings.HasPrefix(err.Error(), "fuzz.json") {
				t.Fatalf("error %q does not name the file", err)
			}
			return
		}
		b, err := json.Marshal(s)
		if err != nil {
			t.Fatal(err)
		}
		s2, err := ParseSession(b, "again.json")
		if err != nil {
			t.Fatalf("re-encoded session does not parse: %v", err)
		}
		b2, _ := json.Marshal(s2)
		if !bytes.Equal(b, b2) {
			t.Fatalf("round trip changed the session:\n%s\n%s", b, b2)
		}
	})
}

// FuzzReadCSV: no input panics; what parses has ascending positive
// frequencies and finite values, and survives WriteCSV/ReadCSV.
func FuzzReadCSV(f *testing.F) {
	f.Add("frequency_hz,gain_db,phase_deg\n10,20,-90\n100,0,-135\n")
	f.Add("# c\nphase_deg,frequency_hz,gain_db,gain_sigma_db\n-90,1,2,\n")
	f.Fuzz(func(t *testing.T, in string) {
		pts, err := ReadCSV(strings.NewReader(in), "fuzz.csv")
		if err != nil {
			if !strings.HasPrefix(err.Error(), "fuzz.csv") && !strings.HasPrefix(err.Error(), "read fuzz.csv") {
				t.Fatalf("error %q does not name the file", err)
			}
			return
		}
		for i, p := range pts {
			if !(p.FreqHz > 0) || (i > 0 && p.FreqHz <= pts[i-1].FreqHz) {
				t.Fatalf("row %d: frequency %g not positive and ascending", i, p.FreqHz)
			}
			for _, v := range []float64{p.FreqHz, p.GainDB, p.PhaseDeg, p.GainSigmaDB, p.PhaseSigmaDeg} {
				if math.IsNaN(v) || math.IsInf(v, 0) {
					t.Fatalf("row %d: non-finite value in %+v", i, p)
				}
			}
		}
		s := &Session{}
		for _, p := range pts {
			s.Points = append(s.Points, Point{FreqHz: p.FreqHz, Chosen: -1, Attempts: []Attempt{{GainDB: p.GainDB, PhaseDeg: p.PhaseDeg, GainSigmaDB: p.GainSigmaDB, PhaseSigmaDeg: p.PhaseSigmaDeg}}})
		}
		var b bytes.Buffer
		if err := WriteCSV(&b, s); err != nil {
			t.Fatal(err)
		}
		back, err := ReadCSV(&b, "again.csv")
		if err != nil {
			t.Fatalf("written CSV does not read back: %v", err)
		}
		if len(back) != len(pts) {
			t.Fatalf("%d rows back, want %d", len(back), len(pts))
		}
	})
}

func ExampleReadCSV() {
	in := "# loop gain from a circuit simulator\n" +
		"frequency_hz,gain_db,phase_deg\n" +
		"100,20,-100\n" +
		"1000,0,-170\n" +
		"10000,-20,175\n"
	pts, err := ReadCSV(strings.NewReader(in), "loop.csv")
	if err != nil {
		fmt.Println(err)
		return
	}
	for _, p := range pts {
		fmt.Printf("%g Hz %g dB %g°\n", p.FreqHz, p.GainDB, p.PhaseDeg)
	}
	_, err = ReadCSV(strings.NewReader("frequency_hz,gain_db,phase_deg\n100,x,3\n"), "bad.csv")
	fmt.Println(err)
	// Output:
	// 100 Hz 20 dB -100°
	// 1000 Hz 0 dB -170°
	// 10000 Hz -20 dB -185°
	// bad.csv:2:5: gain_db: "x" is not a finite number
}

func ExampleParseSession() {
	_, err := ParseSession([]byte(`{"schema": 2, "points": []}`), "future.json")
	fmt.Println(err)
	_, err = ParseSession([]byte("{\"schema\": 1,\n \"points\": [{\"freq_hz\": 100,"), "cut.json")
	fmt.Println(err)
	// Output:
	// future.json: schema 2 is newer than this build of loopsweep reads (1); use a newer loopsweep: unsupported session schema
	// cut.json:2:29 (byte 42): truncated or unterminated JSON (unexpected end of JSON input)
}
