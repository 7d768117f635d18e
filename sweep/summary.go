package sweep

import (
	"errors"
	"fmt"
	"io"
	"math"

	"loopsweep/analysis"
)

// SummaryJSON is the machine-readable result of a session, printed by
// `sweep --json` and `analyze --json` alike. Pointers are null when the
// quantity does not exist (no crossing in the band, or a ratio sweep).
type SummaryJSON struct {
	Measure Measure `json:"measure"`
	// The worst-case crossings: the gain crossover with the smallest
	// phase margin and the phase crossover with the smallest gain margin.
	CrossoverHz      *float64 `json:"crossover_hz"`
	PhaseMarginDeg   *float64 `json:"phase_margin_deg"`
	PhaseMarginSigma *float64 `json:"phase_margin_sigma_deg"`
	PhaseCrossoverHz *float64 `json:"phase_crossover_hz"`
	GainMarginDB     *float64 `json:"gain_margin_db"`
	GainMarginSigma  *float64 `json:"gain_margin_sigma_db"`
	// GainReach and PhaseReach say where a missing crossing lies:
	// "reached", "below band", "above band" or "not found".
	GainReach       string              `json:"gain_crossover_reach"`
	PhaseReach      string              `json:"phase_crossover_reach"`
	GainCrossovers  []GainCrossoverJSON `json:"gain_crossovers"`
	PhaseCrossovers []PhaseCrossJSON    `json:"phase_crossovers"`
	ModulusMargin   *float64            `json:"modulus_margin"`
	ModulusFreqHz   *float64            `json:"modulus_freq_hz"`
	ModulusSigma    *float64            `json:"modulus_margin_sigma"`
	Flagged         int                 `json:"flagged"`
	Complete        bool                `json:"complete"`
	Points          []PointJSON         `json:"points"`
}

// GainCrossoverJSON is one |L| = 1 crossing.
type GainCrossoverJSON struct {
	FreqHz         float64 `json:"freq_hz"`
	FreqSigmaHz    float64 `json:"freq_sigma_hz"`
	PhaseMarginDeg float64 `json:"phase_margin_deg"`
	SigmaDeg       float64 `json:"sigma_deg"`
	DelayMarginS   float64 `json:"delay_margin_s"`
}

// PhaseCrossJSON is one angle(L) = −180° crossing.
type PhaseCrossJSON struct {
	FreqHz       float64 `json:"freq_hz"`
	FreqSigmaHz  float64 `json:"freq_sigma_hz"`
	GainMarginDB float64 `json:"gain_margin_db"`
	SigmaDB      float64 `json:"sigma_db"`
}

// PointJSON is one measured point's chosen attempt.
type PointJSON struct {
	FreqHz        float64 `json:"freq_hz"`
	GainDB        float64 `json:"gain_db"`
	PhaseDeg      float64 `json:"phase_deg"`
	GainSigmaDB   float64 `json:"gain_sigma_db"`
	PhaseSigmaDeg float64 `json:"phase_sigma_deg"`
	Attempts      int     `json:"attempts"`
	Flagged       bool    `json:"flagged"`
	Flag          string  `json:"flag,omitempty"`
}

// ReachString names an analysis.Reach for the summary.
func ReachString(r analysis.Reach) string {
	switch r {
	case analysis.Reached:
		return "reached"
	case analysis.BelowBand:
		return "below band"
	case analysis.AboveBand:
		return "above band"
	}
	return "not found"
}

func ptr(x float64) *float64 {
	if !finite(x) {
		return nil
	}
	return &x
}

// Summary builds the JSON summary of s. A ratio session gets null margins
// and no error; a loop session whose margins cannot be computed returns
// the error.
func Summary(s *Session) (SummaryJSON, error) {
	out := SummaryJSON{
		Measure:         s.Settings.Measure,
		Complete:        s.Complete,
		GainCrossovers:  []GainCrossoverJSON{},
		PhaseCrossovers: []PhaseCrossJSON{},
		Points:          []PointJSON{},
		GainReach:       ReachString(analysis.NotFound),
		PhaseReach:      ReachString(analysis.NotFound),
	}
	if out.Measure == "" {
		out.Measure = MeasureLoop
	}
	for i, p := range s.Points {
		if p.Flagged {
			out.Flagged++
		}
		a, ok := s.Chosen(i)
		if !ok {
			continue
		}
		out.Points = append(out.Points, PointJSON{
			FreqHz: a.Tone(p.FreqHz), GainDB: a.GainDB, PhaseDeg: a.PhaseDeg,
			GainSigmaDB: a.GainSigmaDB, PhaseSigmaDeg: a.PhaseSigmaDeg,
			Attempts: len(p.Attempts), Flagged: p.Flagged, Flag: p.Flag,
		})
	}
	m, err := s.Margins()
	if errors.Is(err, ErrNotLoop) {
		return out, nil
	}
	if err != nil {
		return out, fmt.Errorf("margins: %w", err)
	}
	out.GainReach, out.PhaseReach = ReachString(m.GainReach), ReachString(m.PhaseReach)
	for _, g := range m.GainCrossovers {
		out.GainCrossovers = append(out.GainCrossovers, GainCrossoverJSON{g.FreqHz, g.SigmaFreqHz, g.PhaseMarginDeg, g.SigmaDeg, g.DelayMarginS})
	}
	for _, p := range m.PhaseCrossovers {
		out.PhaseCrossovers = append(out.PhaseCrossovers, PhaseCrossJSON{p.FreqHz, p.SigmaFreqHz, p.GainMarginDB, p.SigmaDB})
	}
	if w := m.WorstPM; w >= 0 && w < len(m.GainCrossovers) {
		g := m.GainCrossovers[w]
		out.CrossoverHz, out.PhaseMarginDeg, out.PhaseMarginSigma = ptr(g.FreqHz), ptr(g.PhaseMarginDeg), ptr(g.SigmaDeg)
	}
	if w := m.WorstGM; w >= 0 && w < len(m.PhaseCrossovers) {
		p := m.PhaseCrossovers[w]
		out.PhaseCrossoverHz, out.GainMarginDB, out.GainMarginSigma = ptr(p.FreqHz), ptr(p.GainMarginDB), ptr(p.SigmaDB)
	}
	if m.ModulusMargin > 0 {
		out.ModulusMargin, out.ModulusFreqHz = ptr(m.ModulusMargin), ptr(m.ModulusFreqHz)
		out.ModulusSigma = ptr(m.ModulusSigma)
	}
	return out, nil
}

// WriteText prints a human summary of the margins.
func (j SummaryJSON) WriteText(w io.Writer) error {
	f := func(p *float64, format string) string {
		if p == nil {
			return "not reached"
		}
		return fmt.Sprintf(format, *p)
	}
	sig := func(p *float64) float64 {
		if p == nil {
			return math.NaN()
		}
		return *p
	}
	var err error
	pr := func(format string, a ...any) {
		if err == nil {
			_, err = fmt.Fprintf(w, format, a...)
		}
	}
	pr("points: %d measured, %d flagged\n", len(j.Points), j.Flagged)
	if j.Measure == MeasureRatio {
		pr("measure: ratio (no margins)\n")
		return err
	}
	pr("crossover: %s (%s)\n", f(j.CrossoverHz, "%.4g Hz"), j.GainReach)
	pr("phase margin: %s", f(j.PhaseMarginDeg, "%.2f°"))
	if j.PhaseMarginDeg != nil {
		pr(" ± %.2f°", sig(j.PhaseMarginSigma))
	}
	pr("\nphase crossover: %s (%s)\n", f(j.PhaseCrossoverHz, "%.4g Hz"), j.PhaseReach)
	pr("gain margin: %s", f(j.GainMarginDB, "%.2f dB"))
	if j.GainMarginDB != nil {
		pr(" ± %.2f dB", sig(j.GainMarginSigma))
	}
	pr("\nmodulus margin: %s", f(j.ModulusMargin, "%.3f"))
	if j.ModulusMargin != nil {
		pr(" ± %.2g at %.4g Hz", sig(j.ModulusSigma), *j.ModulusFreqHz)
	}
	pr("\n")
	if len(j.GainCrossovers) > 1 || len(j.PhaseCrossovers) > 1 {
		for _, g := range j.GainCrossovers {
			pr("  gain crossover %.4g Hz: PM %.2f° ± %.2f°\n", g.FreqHz, g.PhaseMarginDeg, g.SigmaDeg)
		}
		for _, p := range j.PhaseCrossovers {
			pr("  phase crossover %.4g Hz: GM %.2f dB ± %.2f dB\n", p.FreqHz, p.GainMarginDB, p.SigmaDB)
		}
	}
	return err
}
