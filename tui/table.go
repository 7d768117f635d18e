package tui

import (
	"fmt"
	"strings"

	tea "github.com/charmbracelet/bubbletea"

	"loopsweep/sweep"
)

// tableModel is the points table; its cursor is the plot's cursor (the
// root owns the index and sets it on both).
type tableModel struct {
	st     *styles
	w, h   int
	pts    []pointView
	cursor int
	active int
}

func newTable(st *styles) tableModel { return tableModel{st: st, cursor: -1, active: -1} }

func (m *tableModel) SetSize(w, h int)             { m.w, m.h = w, h }
func (m *tableModel) SetData(pts []pointView)      { m.pts = pts }
func (m *tableModel) SetCursor(cursor, active int) { m.cursor, m.active = cursor, active }

func (m tableModel) Update(msg tea.Msg) (tableModel, tea.Cmd) { return m, nil }

// qualityText names a point's quality in words (the glyph is the plot's).
func qualityText(p pointView) string {
	switch {
	case p.Quality == qFlagged:
		return "x!"
	case p.Quality == qRetried:
		return fmt.Sprintf("o%d", p.Attempts)
	case !p.Has:
		return ""
	}
	return "·"
}

// tableRow is the format of a row: marker, number, frequency, gain dB,
// phase °, SNR dB and quality; 36 cells, so it fits half of 80 columns.
const (
	tableRow    = "%1s%3d %6s %7s %7s %4s %-3s"
	tableHeader = "   #   freq gain dB phase °  SNR q"
)

func (m tableModel) View() string {
	if m.h <= 0 {
		return ""
	}
	lines := []string{m.st.title.Render(tableHeader)}
	rows := m.h - 1
	// Keep the cursor in view, centred when the table scrolls.
	first := 0
	if len(m.pts) > rows && m.cursor >= 0 {
		first = min(max(m.cursor-rows/2, 0), len(m.pts)-rows)
	}
	for i := first; i < len(m.pts) && i < first+rows; i++ {
		p := m.pts[i]
		// The row marker works without attributes: > selected, * being
		// measured, » both.
		mark := " "
		switch {
		case i == m.cursor && i == m.active:
			mark = "»"
		case i == m.cursor:
			mark = ">"
		case i == m.active:
			mark = "*"
		}
		g, ph, snr := "—", "—", "—"
		if p.Has {
			g, ph, snr = fmt.Sprintf("%.2f", p.GainDB), fmt.Sprintf("%.1f", p.PhaseDeg), fmt.Sprintf("%.0f", p.SNRdB)
		}
		l := fmt.Sprintf(tableRow, mark, i+1, formatHz(p.FreqHz), g, ph, snr, qualityText(p))
		l = fitLine(l, m.w)
		if i == m.cursor {
			l = m.st.sel.Render(l)
		}
		lines = append(lines, l)
	}
	if len(m.pts) == 0 {
		lines = append(lines, m.st.dim.Render("  no points yet"))
	}
	return block(lines, m.w, m.h)
}

// detailLines describe one point: the attempt counted, both channels'
// amplitudes, SNR and harmonics, the amplitude used, why it is flagged.
func detailLines(s *sweep.Session, index int) []string {
	if index < 0 || index >= len(s.Points) {
		return []string{"no point selected"}
	}
	p := s.Points[index]
	head := fmt.Sprintf("point %d  %s Hz", index+1, formatHz(p.FreqHz))
	short := fmt.Sprintf("pt %d  %s Hz", index+1, formatHz(p.FreqHz))
	if len(p.Attempts) == 0 {
		return []string{head + "  not measured yet"}
	}
	a, _ := s.Chosen(index)
	n := 0
	for i := range p.Attempts {
		if p.Attempts[i].Finished.Equal(a.Finished) && p.Attempts[i].Started.Equal(a.Started) {
			n = i + 1
		}
	}
	out := []string{
		fmt.Sprintf("%s  attempt %d of %d  %sVpp", short, n, len(p.Attempts), formatHz(a.AmpVpp)),
		channelLine("ch1", a.Ch1),
		channelLine("ch2", a.Ch2),
		fmt.Sprintf("gain %.2f ± %.2f dB  phase %.1f ± %.1f°", a.GainDB, a.GainSigmaDB, a.PhaseDeg, a.PhaseSigmaDeg),
	}
	var why []string
	if p.Flagged {
		why = append(why, "flagged: "+p.Flag)
	}
	if a.Problem != "" {
		why = append(why, "problem: "+a.Problem)
	}
	if a.Reason != "" {
		why = append(why, "reason: "+a.Reason)
	}
	if len(why) > 0 {
		out = append(out, strings.Join(why, "  "))
	}
	return out
}

func channelLine(name string, c sweep.ChannelReading) string {
	clip := ""
	if c.Clipped {
		clip = "  CLIPPED"
	}
	return fmt.Sprintf("%s %spk SNR %.1fdB H2/H3 %.0f/%.0fdBc%s", name, formatV(c.AmpPeakV), c.SNRdB, c.H2dBc, c.H3dBc, clip)
}

// formatV prints volts with an SI prefix: 12.3mV, 1.00V.
func formatV(v float64) string { return formatHz(v) + "V" }
