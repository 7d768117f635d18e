package tui

import (
	"strings"

	"github.com/charmbracelet/lipgloss"
)

// styles is the small shared struct every panel draws with. It is built
// from one lipgloss renderer, so NO_COLOR (detected by termenv through
// the renderer) turns every colour off at once; the glyphs below keep the
// plot readable then.
type styles struct {
	paint  [numClasses]paint
	title  lipgloss.Style
	dim    lipgloss.Style
	good   lipgloss.Style
	bad    lipgloss.Style
	warn   lipgloss.Style
	sel    lipgloss.Style
	box    lipgloss.Style
	border lipgloss.Style
}

// Glyphs that replace a braille cell. They differ in shape, not only in
// colour.
const (
	glyphRetried   = 'o' // a point measured more than once
	glyphFlagged   = 'x' // a point that stayed bad
	glyphCursor    = '◆' // the selected point
	glyphActive    = '▼' // the frequency being measured, at the top of the gain pane
	glyphCrossover = '◇' // a gain or phase crossover on its reference line
)

func newStyles(r *lipgloss.Renderer) styles {
	if r == nil {
		r = lipgloss.DefaultRenderer()
	}
	fg := func(c string) lipgloss.Style { return r.NewStyle().Foreground(lipgloss.Color(c)) }
	var s styles
	cls := [numClasses]lipgloss.Style{
		clsEmpty:   r.NewStyle(),
		clsGrid:    fg("8"),
		clsRef:     fg("3"),
		clsErr:     fg("8"),
		clsMargin:  fg("5"),
		clsData:    fg("6"),
		clsRetried: fg("3").Bold(true),
		clsFlagged: fg("1").Bold(true),
		clsActive:  fg("2").Bold(true),
		clsCursor:  fg("15").Bold(true),
	}
	for k, st := range cls {
		s.paint[k] = splitPaint(st)
	}
	s.title = r.NewStyle().Bold(true)
	s.dim = fg("8")
	s.good = fg("2")
	s.bad = fg("1").Bold(true)
	s.warn = fg("3")
	s.sel = r.NewStyle().Reverse(true)
	s.border = fg("8")
	return s
}

// splitPaint renders a sample through st and keeps what comes before and
// after it, so runs of cells can be wrapped without a Render per cell.
func splitPaint(st lipgloss.Style) paint {
	out := st.Render("X")
	i := strings.Index(out, "X")
	if i < 0 {
		return paint{}
	}
	return paint{pre: out[:i], post: out[i+1:]}
}
