package main

import (
	"bytes"
	"crypto/sha256"
	"encoding/json"
	"fmt"
	"math"
	"math/cmplx"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"loopsweep/sweep"
)

// exampleSessions are the committed sessions made from closed-form loops
// by sweep's TestExampleSessions.
var exampleSessions = []string{
	"bench-supply-light-load.json", "bench-supply-heavy-load.json",
	"motor-current-loop.json", "charger-voltage-loop.json", "minimal-fields.json",
}

func sessionPath(name string) string { return filepath.Join("..", "..", "testdata", "sessions", name) }

// runLoopsweep runs the command line in process and returns the exit
// status, stdout and stderr.
func runLoopsweep(args ...string) (int, string, string) {
	var out, errb bytes.Buffer
	code := run(args, &out, &errb)
	return code, out.String(), errb.String()
}

// analyzeJSONOf runs analyze --json on one file and decodes the object.
func analyzeJSONOf(t *testing.T, path string) analyzeJSON {
	t.Helper()
	code, out, errs := runLoopsweep("analyze", "--json", path)
	if code != 0 {
		t.Fatalf("analyze --json %s: exit %d: %s", path, code, errs)
	}
	var a analyzeJSON
	if err := json.Unmarshal([]byte(out), &a); err != nil {
		t.Fatalf("analyze --json output: %v\n%s", err, out)
	}
	return a
}

// analyze's margins are the live margins: the engine's Session.Margins
// on the same session gives the same numbers, bit for bit, and the
// summary keys are those of sweep --json (sweep.Summary).
func TestAnalyzeJSONEqualsLiveMargins(t *testing.T) {
	for _, name := range exampleSessions {
		t.Run(name, func(t *testing.T) {
			path := sessionPath(name)
			s, err := sweep.LoadSession(path)
			if err != nil {
				t.Fatal(err)
			}
			live, err := s.Margins()
			if err != nil {
				t.Fatal(err)
			}
			a := analyzeJSONOf(t, path)
			if len(a.GainCrossovers) != len(live.GainCrossovers) || len(a.PhaseCrossovers) != len(live.PhaseCrossovers) {
				t.Fatalf("%d/%d crossings, live %d/%d", len(a.GainCrossovers), len(a.PhaseCrossovers), len(live.GainCrossovers), len(live.PhaseCrossovers))
			}
			for i, g := range live.GainCrossovers {
				if a.GainCrossovers[i].FreqHz != g.FreqHz || a.GainCrossovers[i].PhaseMarginDeg != g.PhaseMarginDeg {
					t.Errorf("gain crossover %d: %+v, live %+v", i, a.GainCrossovers[i], g)
				}
			}
			for i, p := range live.PhaseCrossovers {
				if a.PhaseCrossovers[i].FreqHz != p.FreqHz || a.PhaseCrossovers[i].GainMarginDB != p.GainMarginDB {
					t.Errorf("phase crossover %d: %+v, live %+v", i, a.PhaseCrossovers[i], p)
				}
			}
			if live.WorstPM >= 0 && (a.PhaseMarginDeg == nil || *a.PhaseMarginDeg != live.GainCrossovers[live.WorstPM].PhaseMarginDeg) {
				t.Errorf("phase_margin_deg %v, live %g", a.PhaseMarginDeg, live.GainCrossovers[live.WorstPM].PhaseMarginDeg)
			}
			if live.WorstGM >= 0 && (a.GainMarginDB == nil || *a.GainMarginDB != live.PhaseCrossovers[live.WorstGM].GainMarginDB) {
				t.Errorf("gain_margin_db %v, live %g", a.GainMarginDB, live.PhaseCrossovers[live.WorstGM].GainMarginDB)
			}
			if live.WorstGM < 0 && a.GainMarginDB != nil {
				t.Errorf("gain_margin_db %v where live has none", *a.GainMarginDB)
			}
			if a.ModulusMargin == nil || *a.ModulusMargin != live.ModulusMargin {
				t.Errorf("modulus_margin %v, live %g", a.ModulusMargin, live.ModulusMargin)
			}
			// Ms = 1/modulus margin (Skogestad & Postlethwaite §2.4).
			if a.SensitivityPeak == nil || *a.SensitivityPeak != 1/live.ModulusMargin {
				t.Errorf("sensitivity_peak %v, want 1/%g", a.SensitivityPeak, live.ModulusMargin)
			}
			// The whole summary is sweep.Summary's.
			sum, err := sweep.Summary(s)
			if err != nil {
				t.Fatal(err)
			}
			want, _ := json.Marshal(sum)
			got, _ := json.Marshal(a.SummaryJSON)
			if !bytes.Equal(got, want) {
				t.Errorf("summary differs from sweep.Summary:\n%s\n%s", got, want)
			}
		})
	}
}

// The keys issue 5 and 7 promise for --json.
func TestAnalyzeJSONKeys(t *testing.T) {
	_, out, _ := runLoopsweep("analyze", "--json", sessionPath("bench-supply-heavy-load.json"))
	var m map[string]json.RawMessage
	if err := json.Unmarshal([]byte(out), &m); err != nil {
		t.Fatal(err)
	}
	for _, k := range []string{"crossover_hz", "phase_margin_deg", "phase_crossover_hz", "gain_margin_db",
		"gain_crossovers", "phase_crossovers", "modulus_margin", "points",
		"sensitivity_peak", "closed_loop_peak_db", "overshoot_pct", "meets_targets"} {
		if _, ok := m[k]; !ok {
			t.Errorf("key %q missing", k)
		}
	}
}

// writeLoopCSV samples L at ppd points per decade from f0 to f1 Hz and
// writes the loop-gain CSV analyze reads (wrapped phase, as an external
// tool would export it).
func writeLoopCSV(t *testing.T, L func(s complex128) complex128, f0, f1 float64, ppd int) string {
	t.Helper()
	var b strings.Builder
	b.WriteString("# closed-form loop sampled by the test\nfrequency_hz,gain_db,phase_deg\n")
	n := int(math.Round(math.Log10(f1/f0) * float64(ppd)))
	for k := 0; k <= n; k++ {
		f := f0 * math.Pow(10, float64(k)/float64(ppd))
		h := L(complex(0, 2*math.Pi*f))
		fmt.Fprintf(&b, "%.17g,%.17g,%.17g\n", f, 20*math.Log10(cmplx.Abs(h)), cmplx.Phase(h)*180/math.Pi)
	}
	path := filepath.Join(t.TempDir(), "loop.csv")
	if err := os.WriteFile(path, []byte(b.String()), 0o644); err != nil {
		t.Fatal(err)
	}
	return path
}

// Margins of CSV files sampled at 10 points per decade from closed-form
// loops (REFERENCES.md): K/(s+1)^3 has GM = 8/K at ω = √3 rad/s; the
// second-order loop ωn²/(s(s+2ζωn)) has ωc = ωn·sqrt(sqrt(1+4ζ⁴)−2ζ²),
// PM = atan(2ζωn/ωc) and step overshoot exp(−πζ/sqrt(1−ζ²)) (Ogata;
// Franklin, Powell & Emami-Naeini; memory). Tolerances: the analysis
// package's target at 10 points per decade, 0.1° and 0.05 dB (issue 2);
// crossover frequencies 1%; overshoot 0.5 percentage point (the PM
// tolerance moves the predicted overshoot by about 0.2 point near ζ=0.3,
// by the closed form's slope). The sensitivity peak is checked against
// max|1/(1+L)| on a dense closed-form grid, to 1%.
func TestAnalyzeCSVClosedForm(t *testing.T) {
	const pmTol, gmTol, fTol, osTol, msTol = 0.1, 0.05, 0.01, 0.5, 0.01
	denseMs := func(L func(complex128) complex128, f0, f1 float64) float64 {
		ms := 0.0
		for k := 0; k <= 200000; k++ {
			f := f0 * math.Pow(f1/f0, float64(k)/200000)
			ms = math.Max(ms, cmplx.Abs(1/(1+L(complex(0, 2*math.Pi*f)))))
		}
		return ms
	}
	for _, k := range []float64{2, 4, 6} {
		t.Run(fmt.Sprintf("third-order K=%g", k), func(t *testing.T) {
			fp := 1000.0 // pole at 1 kHz: ω = √3·ωp ↔ f = √3·fp
			L := func(s complex128) complex128 {
				d := 1 + s/complex(2*math.Pi*fp, 0)
				return complex(k, 0) / (d * d * d)
			}
			a := analyzeJSONOf(t, writeLoopCSV(t, L, 10, 100e3, 10))
			wantGM := 20 * math.Log10(8/k)
			if a.GainMarginDB == nil || math.Abs(*a.GainMarginDB-wantGM) > gmTol {
				t.Errorf("GM %v dB, closed form %g dB", a.GainMarginDB, wantGM)
			}
			if a.PhaseCrossoverHz == nil || math.Abs(*a.PhaseCrossoverHz/(math.Sqrt(3)*fp)-1) > fTol {
				t.Errorf("phase crossover %v Hz, closed form %g Hz", a.PhaseCrossoverHz, math.Sqrt(3)*fp)
			}
			if ms := denseMs(L, 10, 100e3); a.SensitivityPeak == nil || math.Abs(*a.SensitivityPeak/ms-1) > msTol {
				t.Errorf("Ms %v, dense closed form %g", a.SensitivityPeak, ms)
			}
		})
	}
	for _, zeta := range []float64{0.3, 0.5, 0.7} {
		t.Run(fmt.Sprintf("second-order zeta=%g", zeta), func(t *testing.T) {
			fn := 2000.0
			wn := 2 * math.Pi * fn
			L := func(s complex128) complex128 { return complex(wn*wn, 0) / (s * (s + complex(2*zeta*wn, 0))) }
			a := analyzeJSONOf(t, writeLoopCSV(t, L, 10, 1e6, 10))
			r := math.Sqrt(math.Sqrt(1+4*math.Pow(zeta, 4)) - 2*zeta*zeta)
			wantPM := math.Atan(2*zeta/r) * 180 / math.Pi
			if a.PhaseMarginDeg == nil || math.Abs(*a.PhaseMarginDeg-wantPM) > pmTol {
				t.Errorf("PM %v°, closed form %g°", a.PhaseMarginDeg, wantPM)
			}
			if a.CrossoverHz == nil || math.Abs(*a.CrossoverHz/(fn*r)-1) > fTol {
				t.Errorf("crossover %v Hz, closed form %g Hz", a.CrossoverHz, fn*r)
			}
			if a.GainMarginDB != nil {
				t.Errorf("GM %g dB: the second-order loop never reaches −180°", *a.GainMarginDB)
			}
			wantOS := 100 * math.Exp(-math.Pi*zeta/math.Sqrt(1-zeta*zeta))
			if a.OvershootPct == nil || math.Abs(*a.OvershootPct-wantOS) > osTol {
				t.Errorf("overshoot %v %%, closed form %g %%", a.OvershootPct, wantOS)
			}
			if ms := denseMs(L, 10, 1e6); a.SensitivityPeak == nil || math.Abs(*a.SensitivityPeak/ms-1) > msTol {
				t.Errorf("Ms %v, dense closed form %g", a.SensitivityPeak, ms)
			}
		})
	}
}

// A session exported with --csv and analyzed again gives the same
// margins, exactly.
func TestAnalyzeCSVOfSession(t *testing.T) {
	path := sessionPath("bench-supply-heavy-load.json")
	code, out, errs := runLoopsweep("analyze", path, "--csv")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	if !strings.HasPrefix(out, strings.Join(sweep.CSVColumns, ",")+"\r\n") {
		t.Fatalf("CSV header: %q", out[:min(len(out), 200)])
	}
	csvPath := filepath.Join(t.TempDir(), "heavy.csv")
	if err := os.WriteFile(csvPath, []byte(out), 0o644); err != nil {
		t.Fatal(err)
	}
	a, b := analyzeJSONOf(t, path), analyzeJSONOf(t, csvPath)
	ga, _ := json.Marshal(a.GainCrossovers)
	gb, _ := json.Marshal(b.GainCrossovers)
	pa, _ := json.Marshal(a.PhaseCrossovers)
	pb, _ := json.Marshal(b.PhaseCrossovers)
	if !bytes.Equal(ga, gb) || !bytes.Equal(pa, pb) || *a.ModulusMargin != *b.ModulusMargin {
		t.Errorf("session and its CSV differ:\n%s %s\n%s %s", ga, pa, gb, pb)
	}
}

// Several files: side by side, and the worst case is the smallest of
// each margin over the files (computed here from sweep.Summary).
func TestAnalyzeCompare(t *testing.T) {
	var paths []string
	worstPM, worstGM := math.Inf(1), math.Inf(1)
	var pmFile, gmFile string
	for _, n := range exampleSessions {
		p := sessionPath(n)
		paths = append(paths, p)
		s, err := sweep.LoadSession(p)
		if err != nil {
			t.Fatal(err)
		}
		sum, err := sweep.Summary(s)
		if err != nil {
			t.Fatal(err)
		}
		if sum.PhaseMarginDeg != nil && *sum.PhaseMarginDeg < worstPM {
			worstPM, pmFile = *sum.PhaseMarginDeg, p
		}
		if sum.GainMarginDB != nil && *sum.GainMarginDB < worstGM {
			worstGM, gmFile = *sum.GainMarginDB, p
		}
	}
	code, out, errs := runLoopsweep(append([]string{"analyze"}, paths...)...)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	for _, want := range []string{
		"== comparison",
		fmt.Sprintf("worst phase margin: %.2f°", worstPM), pmFile,
		fmt.Sprintf("worst gain margin: %.2f dB (%s)", worstGM, gmFile),
		"all files meet PM ≥ 45°, GM ≥ 6 dB: not met",
	} {
		if !strings.Contains(out, want) {
			t.Errorf("output lacks %q", want)
		}
	}
	code, out, _ = runLoopsweep(append([]string{"analyze", "--json"}, paths...)...)
	var j struct {
		Files []analyzeJSON `json:"files"`
		Worst worstJSON     `json:"worst"`
	}
	if err := json.Unmarshal([]byte(out), &j); code != 0 || err != nil {
		t.Fatalf("exit %d, %v", code, err)
	}
	if len(j.Files) != len(paths) || j.Worst.PhaseMarginDeg == nil || *j.Worst.PhaseMarginDeg != worstPM ||
		j.Worst.GainMarginDB == nil || *j.Worst.GainMarginDB != worstGM || j.Worst.PhaseMarginFile != pmFile {
		t.Errorf("worst %+v, want PM %g (%s) GM %g", j.Worst, worstPM, pmFile, worstGM)
	}
	// Targets: the light-load loop (PM 67.6°, GM 12.04 dB) meets 45°/6 dB
	// and fails 70°.
	light := sessionPath("bench-supply-light-load.json")
	if a := analyzeJSONOf(t, light); a.MeetsTargets == nil || !*a.MeetsTargets {
		t.Errorf("light load: meets_targets %v, want true", a.MeetsTargets)
	}
	_, out, _ = runLoopsweep("analyze", "--pm-min", "70", light)
	if !strings.Contains(out, "targets PM ≥ 70°, GM ≥ 6 dB: NOT MET") {
		t.Errorf("--pm-min 70 not applied:\n%s", out)
	}
}

func TestAnalyzeText(t *testing.T) {
	code, out, errs := runLoopsweep("analyze", sessionPath("bench-supply-heavy-load.json"))
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	// K=4: GM = 20·log10(8/4) = 6.02 dB (closed form); Ms from the
	// modulus margin.
	for _, want := range []string{"operating point: bench supply, 12 V in, 5 V out, 3 A", "gain margin: 6.02 dB",
		"sensitivity peak Ms:", "step overshoot predicted from PM", "frequency_hz", "flagged: ch2 snr"} {
		if !strings.Contains(out, want) {
			t.Errorf("output lacks %q:\n%s", want, out)
		}
	}
}

func fileSum(t *testing.T, path string) [32]byte {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	return sha256.Sum256(b)
}

// Bad input: exit 2 with an error naming the file (and line for CSV);
// the input is left as it was.
func TestAnalyzeBadInput(t *testing.T) {
	good, err := os.ReadFile(sessionPath("bench-supply-light-load.json"))
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	write := func(name string, data []byte) string {
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, data, 0o644); err != nil {
			t.Fatal(err)
		}
		return p
	}
	cases := []struct {
		name string
		path string
		want string
	}{
		{"truncated", write("trunc.json", good[:len(good)/3]), "truncated"},
		{"unknown schema", write("future.json", []byte(`{"schema":7,"points":[]}`)), "schema 7 is newer"},
		{"other json", write("other.json", []byte(`{"hello":"world"}`)), "not a loopsweep session"},
		{"binary", write("image.png", []byte("\x89PNG\r\n\x1a\n\x00\x00")), "neither a session file nor a loop-gain CSV"},
		{"csv bad row", write("bad.csv", []byte("frequency_hz,gain_db,phase_deg\n10,1,2\n20,oops,3\n")), "bad.csv:3"},
		{"missing", filepath.Join(dir, "absent.json"), "absent.json"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			var before [32]byte
			_, statErr := os.Stat(c.path)
			if statErr == nil {
				before = fileSum(t, c.path)
			}
			code, _, errs := runLoopsweep("analyze", c.path)
			if code != 2 {
				t.Errorf("exit %d, want 2", code)
			}
			if !strings.Contains(errs, c.path) && !strings.Contains(errs, filepath.Base(c.path)) {
				t.Errorf("stderr %q does not name the file", errs)
			}
			if !strings.Contains(errs, c.want) {
				t.Errorf("stderr %q does not say %q", errs, c.want)
			}
			if statErr == nil && fileSum(t, c.path) != before {
				t.Error("input changed")
			}
		})
	}
	for _, args := range [][]string{{"analyze"}, {"analyze", "--json", "--csv", "x"}, {"analyze", "--csv", "a", "b"}, {"analyze", "--pm-min", "x", "a"}} {
		if code, _, _ := runLoopsweep(args...); code != 2 {
			t.Errorf("%q: exit %d, want 2", args, code)
		}
	}
}

// A ratio session (H = V2/V1, here a first-order low pass with its pole
// at 1 kHz) has no margins: analyze says so, keeps the points, and plot
// refuses the loop-only views.
func TestAnalyzeRatioSession(t *testing.T) {
	const fp = 1000.0
	s := &sweep.Session{Schema: sweep.SchemaVersion, OperatingPoint: "output filter alone",
		Settings: sweep.Settings{Measure: sweep.MeasureRatio}, Complete: true}
	for _, f := range []float64{100, 300, 1000, 3000, 10000} {
		h := 1 / (1 + complex(0, f/fp))
		s.Points = append(s.Points, sweep.Point{FreqHz: f, Chosen: -1, Attempts: []sweep.Attempt{{
			Re: real(h), Im: imag(h), GainDB: 20 * math.Log10(cmplx.Abs(h)), PhaseDeg: cmplx.Phase(h) * 180 / math.Pi}}})
	}
	path := filepath.Join(t.TempDir(), "filter.json")
	if err := sweep.SaveSession(path, s); err != nil {
		t.Fatal(err)
	}
	a := analyzeJSONOf(t, path)
	if a.Measure != sweep.MeasureRatio || a.CrossoverHz != nil || a.GainMarginDB != nil || a.ModulusMargin != nil ||
		a.OvershootPct != nil || a.SensitivityPeak != nil || len(a.Points) != 5 {
		t.Errorf("ratio session: %+v", a)
	}
	// First-order low pass at its pole: −3.0103 dB, −45° (REFERENCES.md).
	if p := a.Points[2]; math.Abs(p.GainDB+3.0103) > 1e-4 || math.Abs(p.PhaseDeg+45) > 1e-9 {
		t.Errorf("point at the pole: %+v, want -3.0103 dB, -45°", p)
	}
	_, out, _ := runLoopsweep("analyze", path)
	if !strings.Contains(out, "measure: ratio (no margins)") || strings.Contains(out, "sensitivity peak") {
		t.Errorf("text for a ratio session:\n%s", out)
	}
	if code, _, errs := runLoopsweep("plot", path, "--view", "closed", "-o", filepath.Join(t.TempDir(), "t.svg")); code != 2 || !strings.Contains(errs, "ratio") {
		t.Errorf("plot --view closed of a ratio session: exit %d %s", code, errs)
	}
	if code, _, errs := runLoopsweep("plot", path, "-o", filepath.Join(t.TempDir(), "h.svg")); code != 0 {
		t.Errorf("plot of a ratio session: exit %d %s", code, errs)
	}
}

// End to end: a live sweep of the simulated bench (real loopback TCP)
// prints its margins with --json; analyze --json of the file it saved
// prints the same value for every key the sweep printed.
func TestAnalyzeEqualsLiveSweep(t *testing.T) {
	if testing.Short() {
		t.Skip("runs a simulated sweep (about 3 s)")
	}
	path := filepath.Join(t.TempDir(), "live.json")
	code, live, errs := runLoopsweep("sweep", "--sim", "--headless", "--json", "--out", path)
	if code != 0 {
		t.Fatalf("sweep: exit %d: %s", code, errs)
	}
	code, offline, errs := runLoopsweep("analyze", "--json", path)
	if code != 0 {
		t.Fatalf("analyze: exit %d: %s", code, errs)
	}
	var a, b map[string]json.RawMessage
	if err := json.Unmarshal([]byte(live), &a); err != nil {
		t.Fatalf("sweep --json: %v\n%s", err, live)
	}
	if err := json.Unmarshal([]byte(offline), &b); err != nil {
		t.Fatal(err)
	}
	for _, k := range []string{"crossover_hz", "phase_margin_deg", "gain_margin_db", "points"} {
		if _, ok := a[k]; !ok {
			t.Errorf("sweep --json lacks %q", k)
		}
	}
	for k, v := range a {
		if !bytes.Equal(bytes.Join(bytes.Fields(v), nil), bytes.Join(bytes.Fields(b[k]), nil)) {
			t.Errorf("%s: live %s, offline %s", k, v, b[k])
		}
	}
}

// An interrupted session with a single point has no margins but is not
// bad input: analyze shows the point and says why; plot needs a curve.
func TestAnalyzeTooFewPoints(t *testing.T) {
	path := filepath.Join(t.TempDir(), "one.json")
	doc := `{"schema":1,"points":[{"freq_hz":100,"attempts":[{"gain_db":3,"phase_deg":-100}]},{"freq_hz":200,"attempts":[]}]}`
	if err := os.WriteFile(path, []byte(doc), 0o644); err != nil {
		t.Fatal(err)
	}
	code, out, errs := runLoopsweep("analyze", path)
	if code != 0 || !strings.Contains(out, "points: 1 measured") || !strings.Contains(out, "margins: not computed") {
		t.Errorf("exit %d\n%s%s", code, out, errs)
	}
	a := analyzeJSONOf(t, path)
	if a.MarginsError == "" || a.PhaseMarginDeg != nil || len(a.Points) != 1 {
		t.Errorf("json: %+v", a)
	}
	if code, _, errs := runLoopsweep("plot", path, "-o", filepath.Join(t.TempDir(), "p.svg")); code != 2 || !strings.Contains(errs, "at least 2") {
		t.Errorf("plot: exit %d %s", code, errs)
	}
}
