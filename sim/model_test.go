package sim

import (
	"fmt"
	"math"
	"math/cmplx"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// testStage is a buck power stage with round numbers.
func testStage(esr, rl float64) *Scenario {
	return &Scenario{VinV: 12, InductanceH: 10e-6, CapacitanceF: 100e-6, ESROhm: esr, InductorROhm: rl}
}

// Buck control-to-output transfer function per Erickson & Maksimović,
// Fundamentals of Power Electronics, 2nd ed., ch. 8 (memory):
// Gvd(s) = V/D · (1 + s/ωesr) / (1 + s/(Q·ω0) + (s/ω0)²), ω0 = 1/√(LC),
// Q = R·√(C/L) for the lossless stage, ωesr = 1/(r_C·C).
func TestPlantAgainstErickson(t *testing.T) {
	// lossless stage: the textbook form is exact
	sc := testStage(0, 0)
	const R = 5.0
	num, den := sc.plant(R)
	w0 := 1 / math.Sqrt(sc.InductanceH*sc.CapacitanceF)
	q := R * math.Sqrt(sc.CapacitanceF/sc.InductanceH)
	// f0 = 1/(2π√(10µH·100µF)) = 5032.9 Hz (closed form), Q = 15.81
	if f0 := w0 / (2 * math.Pi); math.Abs(f0-5032.92) > 0.01 {
		t.Fatalf("f0 = %g", f0)
	}
	at := func(w float64) complex128 { s := complex(0, w); return num.eval(s) / den.eval(s) }
	// at resonance |Gvd| = V_in·Q and the phase is −90°
	g := at(w0)
	if math.Abs(cmplx.Abs(g)/(sc.VinV*q)-1) > 1e-9 || math.Abs(cmplx.Phase(g)*180/math.Pi+90) > 1e-7 {
		t.Errorf("at ω0: |Gvd| = %g (want V·Q = %g), ∠ = %g° (want −90°)", cmplx.Abs(g), sc.VinV*q, cmplx.Phase(g)*180/math.Pi)
	}
	for _, w := range []float64{0.01 * w0, 0.3 * w0, 3 * w0, 100 * w0} {
		s := complex(0, w)
		want := complex(sc.VinV, 0) / (1 + s/complex(q*w0, 0) + (s/complex(w0, 0))*(s/complex(w0, 0)))
		if cmplx.Abs(at(w)/want-1) > 1e-9 {
			t.Errorf("ω = %g: %v, textbook %v", w, at(w), want)
		}
	}
	// With ESR the textbook form is the R ≫ r_C approximation, which also
	// neglects the damping r_C adds at resonance (r_C·C·ω0·Q = 0.5 here):
	// away from ω0 it holds within 2·r_C/R relative (the neglected terms
	// are of order r_C/R and r_C/(ω·L)).
	sc = testStage(0.01, 0)
	num, den = sc.plant(R)
	wesr := 1 / (sc.ESROhm * sc.CapacitanceF)
	// fesr = 1/(2π·0.01 Ω·100 µF) = 159.15 kHz (closed form)
	if f := wesr / (2 * math.Pi); math.Abs(f-159154.9) > 0.1 {
		t.Fatalf("fesr = %g", f)
	}
	tol := 2 * sc.ESROhm / R
	for _, w := range []float64{0.1 * w0, 10 * w0, wesr, 10 * wesr} {
		s := complex(0, w)
		want := complex(sc.VinV, 0) * (1 + s/complex(wesr, 0)) / (1 + s/complex(q*w0, 0) + (s/complex(w0, 0))*(s/complex(w0, 0)))
		if d := cmplx.Abs(at(w)/want - 1); d > tol {
			t.Errorf("with ESR, ω = %g: relative difference %g, want < %g", w, d, tol)
		}
	}
	// far above the ESR zero the slope is −20 dB/decade (one pole net):
	// 10× in frequency gives 1/10 in gain (within 1%)
	if r := cmplx.Abs(at(1000*wesr)) / cmplx.Abs(at(100*wesr)); math.Abs(r-0.1) > 1e-3 {
		t.Errorf("slope above the ESR zero: ratio %g per decade, want 0.1", r)
	}
}

// True margins against closed forms (REFERENCES.md, control theory):
// L = K/(1+s/w)³ has its phase crossover at √3·w with GM = 8/K and its
// gain crossover at w·√(K^(2/3) − 1) with PM = 180° − 3·atan(√(K^(2/3)−1));
// L = (ωc/s)·e^(−sT) crosses over at ωc with PM = 90° − ωc·T (deg) and
// has its phase crossover at π/(2T) with GM = −20·log10(2ωcT/π).
func TestTrueMarginsClosedForm(t *testing.T) {
	const tolRel, tolDeg, tolDB = 1e-9, 1e-6, 1e-6
	w := 2 * math.Pi * 1000
	const K = 4.0
	r := rational{num: poly{K}, den: poly{1, 1 / w}.mul(poly{1, 1 / w}).mul(poly{1, 1 / w})}
	tm := trueMargins(r, 1e6)
	x := math.Sqrt(math.Pow(K, 2.0/3) - 1)
	checkOne(t, "K/(1+s/w)^3", tm, x*w/(2*math.Pi), 180-3*math.Atan(x)*180/math.Pi, math.Sqrt(3)*w/(2*math.Pi), 20*math.Log10(8/K), tolRel, tolDeg, tolDB)
	if !tm.StableClosedLoop {
		t.Error("K = 4 < 8 is stable (Routh), reported unstable")
	}
	if tm8 := trueMargins(rational{num: poly{10}, den: r.den}, 1e6); tm8.StableClosedLoop {
		t.Error("K = 10 > 8 is unstable (Routh), reported stable")
	}

	wc, T := 2*math.Pi*2000, 20e-6
	r = rational{num: poly{wc}, den: poly{0, 1}, delayS: T}
	tm = trueMargins(r, 1e6)
	wp := math.Pi / (2 * T)
	if len(tm.Phase) < 1 {
		t.Fatal("no phase crossing")
	}
	checkOne(t, "delayed integrator", tm, 2000, 90-wc*T*180/math.Pi, wp/(2*math.Pi), -20*math.Log10(wc/wp), tolRel, tolDeg, tolDB)
	// the second phase crossing, at 5π/(2T), is further from 1: not the worst
	if len(tm.Phase) < 2 || math.Abs(tm.Phase[1].FreqHz/(5*wp/(2*math.Pi))-1) > tolRel {
		t.Errorf("second phase crossing: %+v", tm.Phase)
	}

	// ωn²/(s(s+2ζωn)): ωc = ωn·√(√(1+4ζ⁴) − 2ζ²), PM = atan(2ζωn/ωc), no
	// phase crossover (Ogata; memory).
	wn, z := 2*math.Pi*3000, 0.3
	r = rational{num: poly{wn * wn}, den: poly{0, 2 * z * wn, 1}}
	tm = trueMargins(r, 1e6)
	wcc := wn * math.Sqrt(math.Sqrt(1+4*z*z*z*z)-2*z*z)
	if tm.CrossoverHz == nil || math.Abs(*tm.CrossoverHz/(wcc/(2*math.Pi))-1) > tolRel ||
		math.Abs(*tm.PhaseMarginDeg-math.Atan(2*z*wn/wcc)*180/math.Pi) > tolDeg {
		t.Errorf("second-order loop: %+v", tm)
	}
	if tm.PhaseCrossoverHz != nil || tm.GainMarginDB != nil {
		t.Errorf("second-order loop has no phase crossover, got %g Hz", *tm.PhaseCrossoverHz)
	}
}

func checkOne(t *testing.T, name string, tm TrueMargins, fc, pm, fp, gm, tolRel, tolDeg, tolDB float64) {
	t.Helper()
	if tm.CrossoverHz == nil || tm.PhaseCrossoverHz == nil {
		t.Fatalf("%s: missing crossing: %+v", name, tm)
	}
	if math.Abs(*tm.CrossoverHz/fc-1) > tolRel || math.Abs(*tm.PhaseMarginDeg-pm) > tolDeg {
		t.Errorf("%s: crossover %.9g Hz PM %.9g°, want %.9g Hz %.9g°", name, *tm.CrossoverHz, *tm.PhaseMarginDeg, fc, pm)
	}
	if math.Abs(*tm.PhaseCrossoverHz/fp-1) > tolRel || math.Abs(*tm.GainMarginDB-gm) > tolDB {
		t.Errorf("%s: phase crossover %.9g Hz GM %.9g dB, want %.9g Hz %.9g dB", name, *tm.PhaseCrossoverHz, *tm.GainMarginDB, fp, gm)
	}
}

// The built-in scenarios show what their names promise.
func TestBuiltinScenarios(t *testing.T) {
	get := func(name, load string) TrueMargins {
		sc, err := LoadScenario(name)
		if err != nil {
			t.Fatal(err)
		}
		tm, err := sc.TrueMargins(load)
		if err != nil {
			t.Fatal(err)
		}
		if tm.CrossoverHz == nil || *tm.CrossoverHz < 500 || *tm.CrossoverHz > 20e3 {
			t.Errorf("%s/%s: crossover %v, want 0.5..20 kHz", name, load, tm.CrossoverHz)
		}
		return tm
	}
	if len(Builtin()) != 4 || Builtin()[0].Name != DefaultScenario {
		t.Fatalf("built-in list: %d, first %s", len(Builtin()), Builtin()[0].Name)
	}
	if pm := *get("well-compensated", "").PhaseMarginDeg; pm < 55 || pm > 65 {
		t.Errorf("well-compensated PM %.1f°, want 55..65", pm)
	}
	if pm := *get("marginal", "").PhaseMarginDeg; pm < 15 || pm > 25 {
		t.Errorf("marginal PM %.1f°, want about 20", pm)
	}
	// conditionally stable: the phase crosses −180° twice below the gain
	// crossover (where |L| > 1: negative gain margins) and the loop is
	// still stable
	c := get("conditional", "")
	below := 0
	for _, p := range c.Phase {
		if p.FreqHz < *c.CrossoverHz && p.GainMarginDB < 0 {
			below++
		}
	}
	if below != 2 || !c.StableClosedLoop || *c.PhaseMarginDeg < 20 {
		t.Errorf("conditional: %d phase crossings below crossover, stable %v, PM %.1f: %+v", below, c.StableClosedLoop, *c.PhaseMarginDeg, c)
	}
	full, light := get("light-load-unstable", "full"), get("light-load-unstable", "light")
	if !full.StableClosedLoop || *full.PhaseMarginDeg < 45 || *full.GainMarginDB < 6 {
		t.Errorf("light-load-unstable at full load: %+v", full)
	}
	if light.StableClosedLoop || *light.PhaseMarginDeg > 0 {
		t.Errorf("light-load-unstable at light load: stable %v, PM %.1f", light.StableClosedLoop, *light.PhaseMarginDeg)
	}
}

func TestScenarioErrors(t *testing.T) {
	base, err := builtinFS.ReadFile("scenarios/marginal.toml")
	if err != nil {
		t.Fatal(err)
	}
	cases := []struct {
		name, from, to, want string
	}{
		{"negative capacitance", "capacitance_f = 470e-6", "capacitance_f = -470e-6", "power_stage.capacitance_f"},
		{"zero load", "load_ohm = 1.0", "load_ohm = 0", "operating_point[1].load_ohm"},
		{"missing inductance", "inductance_h = 10e-6", "", "power_stage.inductance_h: missing"},
		{"unknown key", "esr_ohm = 0.030", "esr_ohm = 0.030\nesr_typo = 1", "unknown key power_stage.esr_typo"},
		{"bad type", `type = "II"`, `type = "IV"`, "compensator.type"},
		{"type III part on type II", "c2_f = 100e-12", "c2_f = 100e-12\nr3_ohm = 1e3", "compensator.r3_ohm"},
		{"bits", "adc_bits = 10", "adc_bits = 20", "measurement.adc_bits"},
		{"output above input", "vref_v = 1.0", "vref_v = 3.0", "vin_v"},
		{"syntax", "vin_v = 12.0", "vin_v = = 12", "line "},
		{"duplicate load", `name = "light"`, `name = "full"`, "used twice"},
	}
	dir := t.TempDir()
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			src := strings.Replace(string(base), c.from, c.to, 1)
			if src == string(base) {
				t.Fatalf("replacement %q not found", c.from)
			}
			path := filepath.Join(dir, "s.toml")
			if err := os.WriteFile(path, []byte(src), 0o644); err != nil {
				t.Fatal(err)
			}
			_, err := LoadScenario(path)
			if err == nil || !strings.Contains(err.Error(), c.want) || !strings.Contains(err.Error(), path) {
				t.Errorf("error %v, want one naming %s and %q", err, path, c.want)
			}
		})
	}
	if _, err := LoadScenario("nonesuch"); err == nil || !strings.Contains(err.Error(), `unknown scenario "nonesuch"`) {
		t.Errorf("unknown name: %v", err)
	}
	sc, _ := LoadScenario("")
	if _, err := sc.Loop("heavy", 1e3); err == nil || !strings.Contains(err.Error(), `"heavy"`) {
		t.Errorf("unknown load: %v", err)
	}
}

// A compensator given by poles and zeros equals the same network given
// by components. Type II op-amp network (common practice): integrator
// f_i = 1/(2π·R1·(C1+C2)), zero 1/(2π·R2·C1), pole
// 1/(2π·R2·C1·C2/(C1+C2)); the poles/zeros form multiplies by the divider
// ratio H, so its integrator frequency is f_i/H.
func TestPolesZerosFormMatchesComponents(t *testing.T) {
	comp, err := LoadScenario("marginal")
	if err != nil {
		t.Fatal(err)
	}
	c := comp.Comp
	r1 := comp.RTopOhm
	h := comp.RBottomOhm / (comp.RTopOhm + comp.RBottomOhm)
	fi := 1 / (2 * math.Pi * r1 * (c.C1F + c.C2F))
	fz := 1 / (2 * math.Pi * c.R2Ohm * c.C1F)
	fp := 1 / (2 * math.Pi * c.R2Ohm * c.C1F * c.C2F / (c.C1F + c.C2F))
	src, _ := builtinFS.ReadFile("scenarios/marginal.toml")
	s := strings.Replace(string(src), "r2_ohm = 30e3\nc1_f = 4.7e-9\nc2_f = 100e-12",
		fmt.Sprintf("integrator_hz = %.17g\nzeros_hz = [%.17g]\npoles_hz = [%.17g]", fi/h, fz, fp), 1)
	if s == string(src) {
		t.Fatal("component lines not found in marginal.toml")
	}
	pz, err := ParseScenario("pz.toml", []byte(s))
	if err != nil {
		t.Fatal(err)
	}
	for _, f := range []float64{10, 300, 3e3, 30e3, 90e3} {
		a, _ := comp.Loop("", f)
		b, _ := pz.Loop("", f)
		if cmplx.Abs(a/b-1) > 1e-9 {
			t.Errorf("%g Hz: components %v, poles/zeros %v", f, a, b)
		}
	}
}
