package sim

import (
	"bytes"
	"embed"
	"errors"
	"fmt"
	"math"
	"os"
	"path"
	"sort"
	"strings"

	"github.com/BurntSushi/toml"
)

// Scenario is one simulated converter loop: a buck power stage, a
// pulse-width modulator, a feedback divider, a compensator, a delay, and
// the measurement realism (noise, ripple, ADC, nonlinearity) the
// simulated digitizer adds. Operating points differ in load resistance.
// The format of the file is documented in README.md ("Simulated bench
// and scenario files").
type Scenario struct {
	Name        string
	Description string
	// Source is "builtin:NAME" or the file path it was read from.
	Source string

	VinV         float64 // input voltage, V
	InductanceH  float64 // L, H
	InductorROhm float64 // inductor series resistance (DCR), Ω; may be 0
	CapacitanceF float64 // C, F
	ESROhm       float64 // capacitor series resistance, Ω; may be 0
	SwitchingHz  float64 // f_sw, Hz (ripple frequency)
	RampVpp      float64 // modulator ramp V_M; modulator gain 1/V_M per volt
	VrefV        float64 // error-amplifier reference, V
	RTopOhm      float64 // divider, output to feedback node, Ω
	RBottomOhm   float64 // divider, feedback node to ground, Ω
	DelayS       float64 // loop delay T_d, s (modulator sampling and gate drive)

	Comp Compensator

	Points []OperatingPoint

	Meas Realism
}

// Compensator is either an op-amp type II/III network by its component
// values (R1 is the divider's top resistor) or a transfer function by its
// integrator frequency, zeros and poles.
type Compensator struct {
	Type string // "II" or "III"
	// Components (ByComponents): Gc(s) = Zf/Zin with Zf = (R2 + 1/sC1) ∥ 1/sC2
	// and Zin = R1 (type II) or R1 ∥ (R3 + 1/sC3) (type III).
	ByComponents   bool
	R2Ohm, C1F     float64
	C2F            float64
	R3Ohm, C3F     float64
	IntegratorHz   float64   // poles/zeros form: Gc(s) = H·(2π·f_i/s)·Π(1+s/ωz)/Π(1+s/ωp)
	ZerosHz        []float64 // poles/zeros form
	PolesHz        []float64 // poles/zeros form
	SensingDivider bool      // poles/zeros form: the divider ratio H multiplies Gc
}

// OperatingPoint is one load of a scenario.
type OperatingPoint struct {
	Name    string
	LoadOhm float64
}

// Realism is what the simulated digitizer adds to the ideal response.
type Realism struct {
	NoiseVrms     float64 // white noise on each channel, V rms
	RippleVpp     float64 // switching ripple at f_sw on the output node, V pp
	ADCBits       int     // 8..16
	SaturationV   float64 // soft-limit level of the output's AC swing, V
	TransientGain float64 // 0..1: the fraction of a step mismatch that appears as a transient (default 1)
}

// Default realism values, used when a scenario file leaves them out.
const (
	defaultNoiseVrms   = 200e-6
	defaultRippleVpp   = 5e-3
	defaultADCBits     = 12
	defaultSaturationV = 0.5
)

//go:embed scenarios/*.toml
var builtinFS embed.FS

// builtinOrder lists the embedded scenarios; the first is the default.
var builtinOrder = []string{"well-compensated", "marginal", "conditional", "light-load-unstable"}

// Builtin returns the embedded scenarios, the default first.
func Builtin() []*Scenario {
	out := make([]*Scenario, 0, len(builtinOrder))
	for _, n := range builtinOrder {
		s, err := loadBuiltin(n)
		if err != nil {
			// The embedded files are checked by TestBuiltinScenarios.
			panic(fmt.Sprintf("sim: embedded scenario %s: %v", n, err))
		}
		out = append(out, s)
	}
	return out
}

// DefaultScenario is the name of the scenario used when none is given.
const DefaultScenario = "well-compensated"

func loadBuiltin(name string) (*Scenario, error) {
	b, err := builtinFS.ReadFile(path.Join("scenarios", name+".toml"))
	if err != nil {
		return nil, err
	}
	return ParseScenario("builtin:"+name, b)
}

// LoadScenario returns the built-in scenario of that name, or reads the
// TOML file at nameOrPath. An empty name gives the default scenario.
func LoadScenario(nameOrPath string) (*Scenario, error) {
	if nameOrPath == "" {
		nameOrPath = DefaultScenario
	}
	for _, n := range builtinOrder {
		if n == nameOrPath {
			return loadBuiltin(n)
		}
	}
	b, err := os.ReadFile(nameOrPath)
	if err != nil {
		if errors.Is(err, os.ErrNotExist) && !strings.ContainsAny(nameOrPath, "/.") {
			return nil, fmt.Errorf("unknown scenario %q (built in: %s; or give a TOML file)", nameOrPath, strings.Join(builtinOrder, ", "))
		}
		return nil, fmt.Errorf("scenario %s: %w", nameOrPath, err)
	}
	return ParseScenario(nameOrPath, b)
}

// Loads returns the names of the operating points; the first is the
// default.
func (s *Scenario) Loads() []string {
	out := make([]string, len(s.Points))
	for i, p := range s.Points {
		out[i] = p.Name
	}
	return out
}

// point returns the operating point named load ("" is the first).
func (s *Scenario) point(load string) (OperatingPoint, error) {
	if load == "" {
		return s.Points[0], nil
	}
	for _, p := range s.Points {
		if p.Name == load {
			return p, nil
		}
	}
	return OperatingPoint{}, fmt.Errorf("scenario %s has no load %q (it has: %s)", s.Name, load, strings.Join(s.Loads(), ", "))
}

// VoutV is the regulated output voltage V_ref·(R_top+R_bottom)/R_bottom,
// the DC operating point both probes see.
func (s *Scenario) VoutV() float64 { return s.VrefV * (s.RTopOhm + s.RBottomOhm) / s.RBottomOhm }

// file is the TOML layout; pointers tell a missing key from a zero.
type file struct {
	Name        *string `toml:"name"`
	Description *string `toml:"description"`
	PowerStage  struct {
		VinV        *float64 `toml:"vin_v"`
		InductanceH *float64 `toml:"inductance_h"`
		InductorR   *float64 `toml:"inductor_resistance_ohm"`
		Capacitance *float64 `toml:"capacitance_f"`
		ESR         *float64 `toml:"esr_ohm"`
		SwitchingHz *float64 `toml:"switching_hz"`
	} `toml:"power_stage"`
	Modulator struct {
		RampVpp *float64 `toml:"ramp_vpp"`
		DelayS  *float64 `toml:"delay_s"`
	} `toml:"modulator"`
	Feedback struct {
		VrefV   *float64 `toml:"vref_v"`
		RTop    *float64 `toml:"r_top_ohm"`
		RBottom *float64 `toml:"r_bottom_ohm"`
	} `toml:"feedback"`
	Compensator struct {
		Type         *string   `toml:"type"`
		R2           *float64  `toml:"r2_ohm"`
		C1           *float64  `toml:"c1_f"`
		C2           *float64  `toml:"c2_f"`
		R3           *float64  `toml:"r3_ohm"`
		C3           *float64  `toml:"c3_f"`
		IntegratorHz *float64  `toml:"integrator_hz"`
		ZerosHz      []float64 `toml:"zeros_hz"`
		PolesHz      []float64 `toml:"poles_hz"`
	} `toml:"compensator"`
	Measurement struct {
		NoiseVrms     *float64 `toml:"noise_vrms"`
		RippleVpp     *float64 `toml:"ripple_vpp"`
		ADCBits       *int     `toml:"adc_bits"`
		SaturationV   *float64 `toml:"saturation_v"`
		TransientGain *float64 `toml:"transient_gain"`
	} `toml:"measurement"`
	OperatingPoints []struct {
		Name    *string  `toml:"name"`
		LoadOhm *float64 `toml:"load_ohm"`
	} `toml:"operating_point"`
}

// ParseScenario parses a scenario file; src names it in errors. Every
// error names the file and the key.
func ParseScenario(src string, data []byte) (*Scenario, error) {
	var f file
	md, err := toml.NewDecoder(bytes.NewReader(data)).Decode(&f)
	if err != nil {
		var pe toml.ParseError
		if errors.As(err, &pe) {
			return nil, fmt.Errorf("scenario %s: line %d: %s", src, pe.Position.Line, pe.Message)
		}
		return nil, fmt.Errorf("scenario %s: %w", src, err)
	}
	if und := md.Undecoded(); len(und) > 0 {
		keys := make([]string, len(und))
		for i, k := range und {
			keys[i] = k.String()
		}
		sort.Strings(keys)
		return nil, fmt.Errorf("scenario %s: unknown key %s", src, strings.Join(keys, ", "))
	}
	p := &parser{src: src}
	s := &Scenario{Source: src}
	s.Name = p.str("name", f.Name)
	if f.Description != nil {
		s.Description = *f.Description
	}
	ps := f.PowerStage
	s.VinV = p.positive("power_stage.vin_v", ps.VinV)
	s.InductanceH = p.positive("power_stage.inductance_h", ps.InductanceH)
	s.InductorROhm = p.nonNegative("power_stage.inductor_resistance_ohm", ps.InductorR, 0)
	s.CapacitanceF = p.positive("power_stage.capacitance_f", ps.Capacitance)
	s.ESROhm = p.nonNegative("power_stage.esr_ohm", ps.ESR, 0)
	s.SwitchingHz = p.positive("power_stage.switching_hz", ps.SwitchingHz)
	s.RampVpp = p.positive("modulator.ramp_vpp", f.Modulator.RampVpp)
	s.DelayS = p.nonNegative("modulator.delay_s", f.Modulator.DelayS, 0)
	s.VrefV = p.positive("feedback.vref_v", f.Feedback.VrefV)
	s.RTopOhm = p.positive("feedback.r_top_ohm", f.Feedback.RTop)
	s.RBottomOhm = p.positive("feedback.r_bottom_ohm", f.Feedback.RBottom)

	c := f.Compensator
	typ := p.str("compensator.type", c.Type)
	switch strings.ToUpper(typ) {
	case "II", "2":
		s.Comp.Type = "II"
	case "III", "3":
		s.Comp.Type = "III"
	case "":
	default:
		p.fail("compensator.type", fmt.Sprintf("%q is not II or III", typ))
	}
	comps := c.R2 != nil || c.C1 != nil || c.C2 != nil || c.R3 != nil || c.C3 != nil
	pz := c.IntegratorHz != nil || c.ZerosHz != nil || c.PolesHz != nil
	switch {
	case comps && pz:
		p.fail("compensator", "give component values (r2_ohm, c1_f, c2_f[, r3_ohm, c3_f]) or integrator_hz, zeros_hz and poles_hz, not both")
	case comps:
		s.Comp.ByComponents = true
		s.Comp.R2Ohm = p.positive("compensator.r2_ohm", c.R2)
		s.Comp.C1F = p.positive("compensator.c1_f", c.C1)
		s.Comp.C2F = p.positive("compensator.c2_f", c.C2)
		if s.Comp.Type == "III" {
			s.Comp.R3Ohm = p.positive("compensator.r3_ohm", c.R3)
			s.Comp.C3F = p.positive("compensator.c3_f", c.C3)
		} else if c.R3 != nil || c.C3 != nil {
			p.fail("compensator.r3_ohm", "r3_ohm and c3_f belong to a type III compensator")
		}
	default:
		s.Comp.IntegratorHz = p.positive("compensator.integrator_hz", c.IntegratorHz)
		want := 1
		if s.Comp.Type == "III" {
			want = 2
		}
		s.Comp.ZerosHz = p.freqs("compensator.zeros_hz", c.ZerosHz, want)
		s.Comp.PolesHz = p.freqs("compensator.poles_hz", c.PolesHz, want)
		s.Comp.SensingDivider = true
	}

	m := f.Measurement
	s.Meas.NoiseVrms = p.nonNegative("measurement.noise_vrms", m.NoiseVrms, defaultNoiseVrms)
	s.Meas.RippleVpp = p.nonNegative("measurement.ripple_vpp", m.RippleVpp, defaultRippleVpp)
	s.Meas.ADCBits = defaultADCBits
	if m.ADCBits != nil {
		s.Meas.ADCBits = *m.ADCBits
		if s.Meas.ADCBits < 8 || s.Meas.ADCBits > 16 {
			p.fail("measurement.adc_bits", fmt.Sprintf("%d is not 8 to 16", s.Meas.ADCBits))
		}
	}
	s.Meas.SaturationV = defaultSaturationV
	if m.SaturationV != nil {
		s.Meas.SaturationV = p.positive("measurement.saturation_v", m.SaturationV)
	}
	s.Meas.TransientGain = p.nonNegative("measurement.transient_gain", m.TransientGain, 1)
	if s.Meas.TransientGain > 1 {
		p.fail("measurement.transient_gain", fmt.Sprintf("%g is above 1", s.Meas.TransientGain))
	}

	if len(f.OperatingPoints) == 0 {
		p.fail("operating_point", "missing: give at least one [[operating_point]] with name and load_ohm")
	}
	seen := map[string]bool{}
	for i, op := range f.OperatingPoints {
		key := fmt.Sprintf("operating_point[%d]", i+1)
		name := p.str(key+".name", op.Name)
		if seen[name] {
			p.fail(key+".name", fmt.Sprintf("%q is used twice", name))
		}
		seen[name] = true
		s.Points = append(s.Points, OperatingPoint{Name: name, LoadOhm: p.positive(key+".load_ohm", op.LoadOhm)})
	}
	if p.err != nil {
		return nil, p.err
	}
	if s.VoutV() >= s.VinV {
		return nil, fmt.Errorf("scenario %s: feedback: output %.4g V (vref_v·(r_top+r_bottom)/r_bottom) is not below power_stage.vin_v %g V", src, s.VoutV(), s.VinV)
	}
	return s, nil
}

// parser collects the first error while reading keys.
type parser struct {
	src string
	err error
}

func (p *parser) fail(key, msg string) {
	if p.err == nil {
		p.err = fmt.Errorf("scenario %s: %s: %s", p.src, key, msg)
	}
}

func (p *parser) str(key string, v *string) string {
	if v == nil || *v == "" {
		p.fail(key, "missing")
		return ""
	}
	return *v
}

func (p *parser) positive(key string, v *float64) float64 {
	if v == nil {
		p.fail(key, "missing")
		return 0
	}
	if !(*v > 0) || math.IsInf(*v, 0) {
		p.fail(key, fmt.Sprintf("%g is not a positive finite value", *v))
		return 0
	}
	if *v < minValue || *v > maxValue {
		p.fail(key, fmt.Sprintf("%g is outside %g to %g, not a physical value for a converter", *v, minValue, maxValue))
		return 0
	}
	return *v
}

// The span of magnitudes a scenario's values may take (in their SI
// units): wide enough for any bench converter, narrow enough that L(s)
// cannot overflow.
const (
	minValue = 1e-15
	maxValue = 1e9
)

func (p *parser) nonNegative(key string, v *float64, def float64) float64 {
	if v == nil {
		return def
	}
	if !(*v >= 0) || math.IsInf(*v, 0) {
		p.fail(key, fmt.Sprintf("%g is negative or not finite", *v))
		return 0
	}
	if *v > maxValue || (*v != 0 && *v < minValue) {
		p.fail(key, fmt.Sprintf("%g is outside %g to %g, not a physical value for a converter", *v, minValue, maxValue))
		return 0
	}
	return *v
}

func (p *parser) freqs(key string, v []float64, want int) []float64 {
	if v == nil {
		p.fail(key, "missing")
		return nil
	}
	if len(v) != want {
		p.fail(key, fmt.Sprintf("%d values, a type %s compensator has %d", len(v), map[int]string{1: "II", 2: "III"}[want], want))
	}
	for _, f := range v {
		if !(f > 0) || math.IsInf(f, 0) || f < minValue || f > maxValue {
			p.fail(key, fmt.Sprintf("%g Hz is not a positive frequency up to %g Hz", f, maxValue))
		}
	}
	return append([]float64(nil), v...)
}
