package sweep

import (
	"errors"
	"fmt"
	"math"
	"sort"
	"strconv"
	"strings"
	"time"
)

// Default settings. The values are common practice for loop measurements
// on switching converters: a small injection (a few tens of millivolts)
// with a hard cap of 0.1 Vpp, ten points per decade, ten cycles of
// settling and ten cycles per record.
//
// Refinement (RefineBudget extra jobs after the plan) works on every gain
// and phase crossover until σ(PM) ≤ RefinePMDeg, σ(GM) ≤ RefineGMDB and
// the crossing's frequency is known to 0.1% (σ(f)/f). σ(f)/f is the
// larger of the first-order figure of analysis.ComputeMargins and the
// bracketing points' σ over the slope fitted across ±0.1 decade, so
// points crowded closer than their own scatter cannot make it look
// smaller than it is. Refinement first puts a point at a crossing that
// has none within the larger of 0.3% and its own σ(f)/f, then re-measures the
// noisier of the two points that bracket it with the cycles the
// variance still lacks. Where the longest record (0.25 s, the
// digitizer's points at MinPerCycle) cannot hold them, as near a phase
// crossover where the return tone is 30 dB or more below the injection,
// that one attempt raises the injection by the square root of the
// shortfall, up to MaxAmpVpp, no further than keeps both probed nodes'
// tones within MaxAmpVpp peak-to-peak (near a gain crossover with a thin
// margin the nodes swing several times the injection, so it stays near
// AmpVpp there), and below half of any level that showed harmonics above
// MaxHarmonicDB in this sweep: the plan's points keep
// AmpVpp, the Guard ramps the step and enforces the cap, and the attempt
// records the amplitude it used. A user who wants no level above AmpVpp
// sets MaxAmpVpp to it.
//
// Cycles is a floor, not the record length: each point's first attempt
// is sized so it is unlikely to need a retry. From the SNR per cycle on
// the weaker channel last measured (the first point: its ranging
// records, A²/(2σ²) per sample times the samples per cycle; later
// points: the most recent unclipped attempt's SNR over its cycles,
// scaled by the square of the amplitude ratio) the engine predicts the
// record's SNR, which grows as 10·log10 of the record length in white
// noise, and when that falls short of MinSNRdB plus a 3 dB margin takes
// ⌈10^((MinSNRdB+3)/10)/(SNR per cycle)⌉ cycles instead, never fewer
// than Cycles and within the record limits (0.25 s, maxCycles, the
// digitizer's points). The first point's longer record keeps its tone,
// so it needs no new settling wait. The judge's retry with more cycles
// stays as the safety net.
const (
	DefaultStartHz       = 100.0
	DefaultStopHz        = 100e3
	DefaultPerDecade     = 10
	DefaultAmpVpp        = 0.02
	DefaultMaxAmpVpp     = 0.1
	DefaultTargetSNRdB   = 40.0
	DefaultMaxHarmonicDB = -30.0
	DefaultSettleCycles  = 10.0
	DefaultSettleMin     = 10 * time.Millisecond
	DefaultCycles        = 10
	DefaultMinPerCycle   = 20
	DefaultMinSNRdB      = 25.0
	DefaultMaxAttempts   = 3
	DefaultRefinePMDeg   = 0.5
	DefaultRefineGMDB    = 0.2
	DefaultRefineBudget  = 32
)

// Limits of a plan, so a typing slip cannot ask for a month-long sweep.
const (
	maxPlanPoints  = 10000
	maxCycles      = 100000
	minPerCycleMin = 4 // below 4 samples per cycle the 3rd harmonic aliases onto the band edge
)

// Defaults returns the default settings (see the Default* constants).
func Defaults() Settings {
	return Settings{
		StartHz:       DefaultStartHz,
		StopHz:        DefaultStopHz,
		PerDecade:     DefaultPerDecade,
		Measure:       MeasureLoop,
		AmpVpp:        DefaultAmpVpp,
		MaxAmpVpp:     DefaultMaxAmpVpp,
		TargetSNRdB:   DefaultTargetSNRdB,
		MaxHarmonicDB: DefaultMaxHarmonicDB,
		SettleCycles:  DefaultSettleCycles,
		SettleMin:     DefaultSettleMin,
		Cycles:        DefaultCycles,
		MinPerCycle:   DefaultMinPerCycle,
		MinSNRdB:      DefaultMinSNRdB,
		MaxAttempts:   DefaultMaxAttempts,
		RefinePMDeg:   DefaultRefinePMDeg,
		RefineGMDB:    DefaultRefineGMDB,
		RefineBudget:  DefaultRefineBudget,
	}
}

// WithDefaults returns s with every zero field that has a default
// replaced by it. SettleCycles, SettleMin, SwitchingHz and RefineBudget
// keep their zero, which is a meaningful choice (no settling, no switching
// frequency, no refinement): build Settings from Defaults() to get those.
// The plan fields (StartHz, StopHz, PerDecade) are filled only when no
// explicit list is given.
func (s Settings) WithDefaults() Settings {
	d := Defaults()
	if len(s.Frequencies) == 0 {
		if s.StartHz == 0 {
			s.StartHz = d.StartHz
		}
		if s.StopHz == 0 {
			s.StopHz = d.StopHz
		}
		if s.PerDecade == 0 && s.LinearStep == 0 {
			s.PerDecade = d.PerDecade
		}
	}
	if s.Measure == "" {
		s.Measure = d.Measure
	}
	if s.MaxAmpVpp == 0 {
		s.MaxAmpVpp = d.MaxAmpVpp
	}
	if s.AmpVpp == 0 {
		s.AmpVpp = math.Min(d.AmpVpp, s.MaxAmpVpp)
	}
	if s.TargetSNRdB == 0 {
		s.TargetSNRdB = d.TargetSNRdB
	}
	if s.MaxHarmonicDB == 0 {
		s.MaxHarmonicDB = d.MaxHarmonicDB
	}
	if s.Cycles == 0 {
		s.Cycles = d.Cycles
	}
	if s.MinPerCycle == 0 {
		s.MinPerCycle = d.MinPerCycle
	}
	if s.MinSNRdB == 0 {
		s.MinSNRdB = d.MinSNRdB
	}
	if s.MaxAttempts == 0 {
		s.MaxAttempts = d.MaxAttempts
	}
	if s.RefinePMDeg == 0 {
		s.RefinePMDeg = d.RefinePMDeg
	}
	if s.RefineGMDB == 0 {
		s.RefineGMDB = d.RefineGMDB
	}
	return s
}

// SettingError names the setting that is wrong.
type SettingError struct {
	Setting string // the JSON name of the field, e.g. "stop_hz"
	Msg     string
}

func (e *SettingError) Error() string { return e.Setting + ": " + e.Msg }

func bad(setting, format string, a ...any) error {
	return &SettingError{Setting: setting, Msg: fmt.Sprintf(format, a...)}
}

func finite(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) }

// Validate checks a complete Settings (after WithDefaults, or built from
// Defaults) and returns a *SettingError naming the first bad setting.
func (s Settings) Validate() error {
	for _, f := range []struct {
		name string
		v    float64
	}{
		{"start_hz", s.StartHz}, {"stop_hz", s.StopHz}, {"linear_step_hz", s.LinearStep},
		{"amp_vpp", s.AmpVpp}, {"max_amp_vpp", s.MaxAmpVpp}, {"target_snr_db", s.TargetSNRdB},
		{"max_harmonic_dbc", s.MaxHarmonicDB}, {"settle_cycles", s.SettleCycles},
		{"switching_hz", s.SwitchingHz}, {"min_snr_db", s.MinSNRdB},
		{"refine_pm_deg", s.RefinePMDeg}, {"refine_gm_db", s.RefineGMDB},
	} {
		if !finite(f.v) {
			return bad(f.name, "%v is not a finite number", f.v)
		}
	}
	switch s.Measure {
	case MeasureLoop, MeasureRatio:
	default:
		return bad("measure", "%q is neither %q nor %q", s.Measure, MeasureLoop, MeasureRatio)
	}
	if len(s.Frequencies) > 0 {
		if len(s.Frequencies) > maxPlanPoints {
			return bad("frequencies_hz", "%d points is more than the limit of %d", len(s.Frequencies), maxPlanPoints)
		}
		for i, f := range s.Frequencies {
			if !finite(f) || f <= 0 {
				return bad("frequencies_hz", "entry %d (%g Hz) is not a positive frequency", i+1, f)
			}
		}
	} else {
		if s.StartHz <= 0 {
			return bad("start_hz", "%g Hz is not a positive frequency", s.StartHz)
		}
		if s.StopHz <= s.StartHz {
			return bad("stop_hz", "%g Hz is not above the start frequency %g Hz", s.StopHz, s.StartHz)
		}
		switch {
		case s.LinearStep < 0:
			return bad("linear_step_hz", "%g Hz is negative", s.LinearStep)
		case s.LinearStep > 0:
			if n := (s.StopHz - s.StartHz) / s.LinearStep; n > maxPlanPoints {
				return bad("linear_step_hz", "%g Hz gives %.0f points, more than the limit of %d", s.LinearStep, n, maxPlanPoints)
			}
		case s.PerDecade <= 0:
			return bad("per_decade", "%d points per decade gives zero points", s.PerDecade)
		default:
			if n := math.Log10(s.StopHz/s.StartHz) * float64(s.PerDecade); n > maxPlanPoints {
				return bad("per_decade", "%d per decade gives %.0f points, more than the limit of %d", s.PerDecade, n, maxPlanPoints)
			}
		}
	}
	if s.MaxAmpVpp <= 0 {
		return bad("max_amp_vpp", "%g Vpp is not a positive amplitude cap", s.MaxAmpVpp)
	}
	if s.AmpVpp <= 0 {
		return bad("amp_vpp", "%g Vpp is not a positive amplitude", s.AmpVpp)
	}
	if s.AmpVpp > s.MaxAmpVpp {
		return bad("amp_vpp", "%g Vpp is above the cap of %g Vpp (max_amp_vpp)", s.AmpVpp, s.MaxAmpVpp)
	}
	for i, b := range s.AmpProfile {
		if !finite(b.FreqHz) || b.FreqHz <= 0 {
			return bad("amp_profile", "breakpoint %d: %g Hz is not a positive frequency", i+1, b.FreqHz)
		}
		if !finite(b.Vpp) || b.Vpp <= 0 {
			return bad("amp_profile", "breakpoint %d: %g Vpp is not a positive amplitude", i+1, b.Vpp)
		}
		if b.Vpp > s.MaxAmpVpp {
			return bad("amp_profile", "breakpoint %d: %g Vpp is above the cap of %g Vpp (max_amp_vpp)", i+1, b.Vpp, s.MaxAmpVpp)
		}
		if i > 0 && b.FreqHz <= s.AmpProfile[i-1].FreqHz {
			return bad("amp_profile", "breakpoint %d: %g Hz is not above the previous breakpoint", i+1, b.FreqHz)
		}
	}
	if s.SettleCycles < 0 {
		return bad("settle_cycles", "%g cycles is negative", s.SettleCycles)
	}
	if s.SettleMin < 0 {
		return bad("settle_min_ns", "%v is negative", s.SettleMin)
	}
	if s.Cycles <= 0 {
		return bad("cycles", "%d cycles per record: at least 1 is needed", s.Cycles)
	}
	if s.Cycles > maxCycles {
		return bad("cycles", "%d cycles is more than the limit of %d", s.Cycles, maxCycles)
	}
	if s.MinPerCycle < minPerCycleMin {
		return bad("min_samples_per_cycle", "%d samples per cycle: at least %d are needed", s.MinPerCycle, minPerCycleMin)
	}
	if s.SwitchingHz < 0 {
		return bad("switching_hz", "%g Hz is negative", s.SwitchingHz)
	}
	if s.MaxAttempts <= 0 {
		return bad("max_attempts", "%d attempts: at least 1 is needed", s.MaxAttempts)
	}
	if s.RefinePMDeg <= 0 {
		return bad("refine_pm_deg", "%g° is not a positive target", s.RefinePMDeg)
	}
	if s.RefineGMDB <= 0 {
		return bad("refine_gm_db", "%g dB is not a positive target", s.RefineGMDB)
	}
	if s.RefineBudget < 0 {
		return bad("refine_budget", "%d points is negative", s.RefineBudget)
	}
	return nil
}

// Plan returns the plan's frequencies in ascending order, Hz:
// the explicit list (sorted, duplicates removed) when given; else
// StartHz, StartHz+LinearStep, … up to StopHz (StopHz included) when
// LinearStep > 0; else round(decades·PerDecade) equal steps in log
// frequency from StartHz to StopHz, both included. Settings that do not
// Validate may give an empty plan.
func (s Settings) Plan() []float64 {
	if len(s.Frequencies) > 0 {
		fs := append([]float64(nil), s.Frequencies...)
		sort.Float64s(fs)
		out := fs[:0]
		for i, f := range fs {
			if i == 0 || f != fs[i-1] {
				out = append(out, f)
			}
		}
		return out
	}
	if !(s.StartHz > 0) || !(s.StopHz > s.StartHz) || !finite(s.StopHz) {
		return nil
	}
	if s.LinearStep > 0 {
		n := int(math.Floor((s.StopHz-s.StartHz)/s.LinearStep + 1e-9))
		if n > maxPlanPoints {
			return nil
		}
		fs := make([]float64, 0, n+2)
		for k := 0; k <= n; k++ {
			fs = append(fs, s.StartHz+float64(k)*s.LinearStep)
		}
		if last := fs[len(fs)-1]; s.StopHz-last > 1e-9*s.StopHz {
			fs = append(fs, s.StopHz)
		}
		return fs
	}
	if s.PerDecade <= 0 {
		return nil
	}
	dec := math.Log10(s.StopHz / s.StartHz)
	n := int(math.Round(dec * float64(s.PerDecade)))
	if n < 1 {
		n = 1
	}
	if n > maxPlanPoints {
		return nil
	}
	fs := make([]float64, n+1)
	for k := range fs {
		fs[k] = s.StartHz * math.Pow(10, dec*float64(k)/float64(n))
	}
	fs[n] = s.StopHz
	return fs
}

// AmplitudeAt returns the planned injection amplitude at f Hz, volts
// peak-to-peak, never above MaxAmpVpp: the profile interpolated linearly
// in amplitude against log frequency (held flat beyond its ends) when one
// is given, else AmpVpp.
func (s Settings) AmplitudeAt(f float64) float64 {
	a := s.AmpVpp
	if p := s.AmpProfile; len(p) > 0 {
		switch {
		case f <= p[0].FreqHz:
			a = p[0].Vpp
		case f >= p[len(p)-1].FreqHz:
			a = p[len(p)-1].Vpp
		default:
			for i := 1; i < len(p); i++ {
				if f <= p[i].FreqHz {
					t := math.Log(f/p[i-1].FreqHz) / math.Log(p[i].FreqHz/p[i-1].FreqHz)
					a = p[i-1].Vpp + t*(p[i].Vpp-p[i-1].Vpp)
					break
				}
			}
		}
	}
	return clampAmp(a, s.MaxAmpVpp)
}

// clampAmp limits a to (0, cap]; NaN or non-positive amplitudes give the
// smallest sensible value, a thousandth of the cap.
func clampAmp(a, cap float64) float64 {
	if !(a > 0) {
		return cap / 1000
	}
	if a > cap {
		return cap
	}
	return a
}

// SettleTime is how long to wait after a change at f Hz:
// max(SettleCycles/f, SettleMin).
func (s Settings) SettleTime(f float64) time.Duration {
	d := time.Duration(s.SettleCycles / f * float64(time.Second))
	if d < s.SettleMin {
		d = s.SettleMin
	}
	return d
}

// ErrSI is returned (wrapped) by ParseSI for malformed numbers.
var ErrSI = errors.New("not a number with an optional SI prefix")

var siPrefix = map[string]float64{
	"p": 1e-12, "n": 1e-9, "u": 1e-6, "µ": 1e-6, "μ": 1e-6, "m": 1e-3,
	"k": 1e3, "K": 1e3, "M": 1e6, "G": 1e9,
}

// ParseSI parses a number with an optional SI prefix and an optional unit:
// with unit "Hz", "100", "1k", "2.2M", "10kHz" and "10 kHz" give 100, 1e3,
// 2.2e6, 1e4 and 1e4; with unit "V", "20mV" gives 0.02. The unit is
// matched without regard to case; the prefix is case sensitive (m is
// milli, M is mega; K is accepted for kilo). Exponents ("1e3") work.
func ParseSI(s, unit string) (float64, error) {
	t := strings.TrimSpace(s)
	if unit != "" && len(t) >= len(unit) && strings.EqualFold(t[len(t)-len(unit):], unit) {
		t = strings.TrimSpace(t[:len(t)-len(unit)])
	}
	mult := 1.0
	for p, m := range siPrefix {
		if strings.HasSuffix(t, p) {
			mult = m
			t = strings.TrimSpace(strings.TrimSuffix(t, p))
			break
		}
	}
	if t == "" || strings.ContainsAny(t, "xXpP_") {
		return 0, fmt.Errorf("%q: %w", s, ErrSI)
	}
	v, err := strconv.ParseFloat(t, 64)
	if err != nil || !finite(v) {
		return 0, fmt.Errorf("%q: %w", s, ErrSI)
	}
	v *= mult
	if !finite(v) {
		return 0, fmt.Errorf("%q: out of range: %w", s, ErrSI)
	}
	return v, nil
}
