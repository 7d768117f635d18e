package tui

import (
	"fmt"
	"strings"

	tea "github.com/charmbracelet/bubbletea"

	"loopsweep/analysis"
)

// Default margin targets (common practice for converter loops; the
// README's references list PM ≥ 45° and GM ≥ 6–10 dB).
const (
	DefaultPMTargetDeg = 45.0
	DefaultGMTargetDB  = 6.0
)

// marginsModel is the margins panel.
type marginsModel struct {
	st       *styles
	w, h     int
	m        analysis.Margins
	err      error // why there are no margins (too few points, …)
	ratio    bool  // a transfer-ratio sweep: margins do not apply
	pmTarget float64
	gmTarget float64
}

func newMargins(st *styles, pmTarget, gmTarget float64) marginsModel {
	return marginsModel{st: st, pmTarget: pmTarget, gmTarget: gmTarget}
}

func (m *marginsModel) SetSize(w, h int) { m.w, m.h = w, h }

// SetMargins sets what to show; err non-nil means none could be computed.
func (m *marginsModel) SetMargins(mg analysis.Margins, err error, ratio bool) {
	m.m, m.err, m.ratio = mg, err, ratio
}

func (m marginsModel) Update(msg tea.Msg) (marginsModel, tea.Cmd) { return m, nil }

// reachText says where a missing crossing is.
func reachText(r analysis.Reach) string {
	switch r {
	case analysis.BelowBand:
		return "not reached yet (below band)"
	case analysis.AboveBand:
		return "not reached yet (above band)"
	default:
		return "not reached yet"
	}
}

// verdict judges the margins against the targets. It is "meets targets"
// only when both margins exist and both meet them; a missing phase
// crossover is not a failure (the gain margin is then unbounded within
// the band) but is said.
func (m marginsModel) verdict() (text string, ok bool) {
	if m.err != nil || len(m.m.GainCrossovers) == 0 {
		return "verdict: crossover not reached yet", false
	}
	pm := m.m.GainCrossovers[worst(m.m.WorstPM, len(m.m.GainCrossovers))].PhaseMarginDeg
	var fails []string
	if pm < m.pmTarget {
		fails = append(fails, fmt.Sprintf("PM %.1f° < %g°", pm, m.pmTarget))
	}
	gmNote := ""
	if len(m.m.PhaseCrossovers) > 0 {
		gm := m.m.PhaseCrossovers[worst(m.m.WorstGM, len(m.m.PhaseCrossovers))].GainMarginDB
		if gm < m.gmTarget {
			fails = append(fails, fmt.Sprintf("GM %.1f dB < %g dB", gm, m.gmTarget))
		}
	} else {
		gmNote = " (no phase crossover in band)"
	}
	if len(fails) > 0 {
		return "verdict: FAILS " + strings.Join(fails, ", "), false
	}
	return "verdict: meets targets" + gmNote, true
}

func worst(i, n int) int {
	if i < 0 || i >= n {
		return 0
	}
	return i
}

func (m marginsModel) lines() []string {
	title := fmt.Sprintf("Margins  (targets PM ≥ %g°, GM ≥ %g dB)", m.pmTarget, m.gmTarget)
	out := []string{m.st.title.Render(title)}
	if m.ratio {
		return append(out, "transfer ratio sweep: no margins")
	}
	mg := m.m
	if m.err != nil {
		mg = analysis.Margins{}
	}
	if n := len(mg.GainCrossovers); n > 0 {
		c := mg.GainCrossovers[worst(mg.WorstPM, n)]
		more := ""
		if n > 1 {
			more = fmt.Sprintf("  (worst of %d)", n)
		}
		out = append(out,
			fmt.Sprintf("fc    %s Hz ± %s Hz%s", formatHz(c.FreqHz), formatHz(c.SigmaFreqHz), more),
			fmt.Sprintf("PM    %s", judge(m.st, fmt.Sprintf("%.1f° ± %.1f°", c.PhaseMarginDeg, c.SigmaDeg), c.PhaseMarginDeg >= m.pmTarget)))
	} else {
		out = append(out, "fc    "+reachText(mg.GainReach), "PM    —")
	}
	if n := len(mg.PhaseCrossovers); n > 0 {
		c := mg.PhaseCrossovers[worst(mg.WorstGM, n)]
		more := ""
		if n > 1 {
			more = fmt.Sprintf("  (worst of %d)", n)
		}
		out = append(out,
			fmt.Sprintf("f180  %s Hz ± %s Hz%s", formatHz(c.FreqHz), formatHz(c.SigmaFreqHz), more),
			fmt.Sprintf("GM    %s", judge(m.st, fmt.Sprintf("%.1f dB ± %.1f dB", c.GainMarginDB, c.SigmaDB), c.GainMarginDB >= m.gmTarget)))
	} else {
		out = append(out, "f180  "+reachText(mg.PhaseReach), "GM    —")
	}
	if mg.ModulusMargin > 0 && finite(mg.ModulusMargin) {
		out = append(out, fmt.Sprintf("MM    %.2f (Ms %.2f) at %s Hz", mg.ModulusMargin, 1/mg.ModulusMargin, formatHz(mg.ModulusFreqHz)))
	} else {
		out = append(out, "MM    —")
	}
	v, ok := m.verdict()
	if ok {
		out = append(out, m.st.good.Render(v))
	} else {
		out = append(out, m.st.warn.Render(v))
	}
	if m.err != nil {
		out = append(out, m.st.dim.Render(trimErr(m.err)))
	}
	return out
}

// judge appends "ok" or "LOW" to a margin: words, not only colour.
func judge(st *styles, s string, ok bool) string {
	if ok {
		return s + "  " + st.good.Render("ok")
	}
	return s + "  " + st.bad.Render("LOW")
}

func trimErr(err error) string {
	s := err.Error()
	if i := strings.IndexByte(s, '\n'); i >= 0 {
		s = s[:i]
	}
	return s
}

func (m marginsModel) View() string { return block(m.lines(), m.w, m.h) }

// block fits lines into a w×h block: each line cut or padded to w cells
// (ANSI aware), missing lines blank, extra lines dropped.
func block(lines []string, w, h int) string {
	if w <= 0 || h <= 0 {
		return ""
	}
	out := make([]string, h)
	for i := range out {
		l := ""
		if i < len(lines) {
			l = lines[i]
		}
		out[i] = fitLine(l, w)
	}
	return strings.Join(out, "\n")
}
