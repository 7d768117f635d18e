package tui

import (
	"fmt"
	"math"
	"strings"

	tea "github.com/charmbracelet/bubbletea"

	"loopsweep/analysis"
)

// plotModel is the Bode plot panel: a gain pane above a phase pane on one
// log-frequency axis, drawn on braille canvases.
type plotModel struct {
	st     *styles
	w, h   int
	pts    []pointView
	loHz   float64
	hiHz   float64
	cursor int // selected point, −1 for none
	active int // point being measured, −1 for none

	margins     analysis.Margins
	haveMargins bool
}

func newPlot(st *styles) plotModel { return plotModel{st: st, cursor: -1, active: -1} }

// SetSize sets the panel's size in cells.
func (m *plotModel) SetSize(w, h int) { m.w, m.h = w, h }

// SetData sets the points and the frequency span of the axis (the plan's
// span, widened to hold every point).
func (m *plotModel) SetData(pts []pointView, loHz, hiHz float64) {
	m.pts, m.loHz, m.hiHz = pts, loHz, hiHz
}

// SetCursor sets the selected and the active point.
func (m *plotModel) SetCursor(cursor, active int) { m.cursor, m.active = cursor, active }

// SetMargins sets the crossovers to mark; ok false hides them.
func (m *plotModel) SetMargins(mg analysis.Margins, ok bool) { m.margins, m.haveMargins = mg, ok }

// Update has no messages of its own: the root sets the plot's data.
func (m plotModel) Update(msg tea.Msg) (plotModel, tea.Cmd) { return m, nil }

// axis maps a value range onto dot rows, top row = hi.
type axis struct {
	lo, hi, step float64
	dots         int
}

func (a axis) y(v float64) int {
	return int(math.Round((a.hi - v) / (a.hi - a.lo) * float64(a.dots-1)))
}

// niceAxis picks a tick step from steps so that at most maxTicks+1 ticks
// cover [lo, hi], and rounds the ends out to whole steps.
func niceAxis(lo, hi float64, steps []float64, maxTicks, dots int) axis {
	if !(hi > lo) {
		lo, hi = lo-steps[0], hi+steps[0]
	}
	if maxTicks < 1 {
		maxTicks = 1
	}
	step := steps[len(steps)-1]
	for _, s := range steps {
		if math.Ceil(hi/s)-math.Floor(lo/s) <= float64(maxTicks) {
			step = s
			break
		}
	}
	for math.Ceil(hi/step)-math.Floor(lo/step) > float64(maxTicks) {
		step *= 2 // data wider than the largest listed step
	}
	a := axis{lo: math.Floor(lo/step) * step, hi: math.Ceil(hi/step) * step, step: step, dots: dots}
	if a.hi == a.lo {
		a.hi += step
	}
	return a
}

var (
	gainSteps  = []float64{1, 2, 5, 10, 20, 40, 50, 100}
	phaseSteps = []float64{15, 30, 45, 90, 180, 360}
)

// Uncertainty bars are drawn when σ is at least this large (and spans
// more than a few dots): smaller ones are lost in the curve's width.
const (
	bigGainSigmaDB   = 0.5
	bigPhaseSigmaDeg = 3
	barCapDB         = 20  // a wild σ is drawn to this length at most
	barCapDeg        = 180 // ditto for phase
)

func (m plotModel) View() string {
	if m.w < 20 || m.h < 5 {
		return fitBlock("plot: window too small", m.w, m.h)
	}
	// Value ranges first: they fix the label width.
	gLo, gHi := 0.0, 0.0
	pLo, pHi := -180.0, -180.0
	// Flagged points do not set the scale when there are enough others:
	// one wild reading must not flatten the curve (it is drawn clipped at
	// the pane's edge instead).
	good := 0
	for _, p := range m.pts {
		if p.Has && p.Quality != qFlagged {
			good++
		}
	}
	any := false
	for _, p := range m.pts {
		if !p.Has || (good >= 2 && p.Quality == qFlagged) {
			continue
		}
		any = true
		gs := math.Min(p.GainSigmaDB, barCapDB)
		ps := math.Min(p.PhaseSigmaDeg, barCapDeg)
		if !(gs >= bigGainSigmaDB) {
			gs = 0
		}
		if !(ps >= bigPhaseSigmaDeg) {
			ps = 0
		}
		gLo, gHi = math.Min(gLo, p.GainDB-gs), math.Max(gHi, p.GainDB+gs)
		pLo, pHi = math.Min(pLo, p.PhaseDeg-ps), math.Max(pHi, p.PhaseDeg+ps)
	}
	if !any {
		gLo, gHi = -20, 20
		pLo, pHi = -270, 0
	}
	gh := (m.h - 1) / 2
	ph := m.h - 1 - gh
	ga := niceAxis(gLo, gHi, gainSteps, max(1, gh/2), 4*gh)
	pa := niceAxis(pLo, pHi, phaseSteps, max(1, ph/2), 4*ph)
	gLabels := tickLabels(ga, gh, "dB", []float64{0})
	pLabels := tickLabels(pa, ph, "°", phaseRefs(pa))
	lw := 1
	for _, l := range append(append([]string{}, gLabels...), pLabels...) {
		lw = max(lw, len([]rune(l)))
	}
	lw++ // the axis line
	cw := m.w - lw
	if cw < 4 {
		return fitBlock("plot: window too small", m.w, m.h)
	}

	lo, hi := m.loHz, m.hiHz
	if !(lo > 0) || !(hi > lo) {
		lo, hi = 10, 100e3
	}
	llo, lhi := math.Log10(lo), math.Log10(hi)
	xdots := 2 * cw
	x := func(f float64) int {
		return int(math.Round((math.Log10(f) - llo) / (lhi - llo) * float64(xdots-1)))
	}

	gc, pc := newCanvas(cw, gh), newCanvas(cw, ph)
	// Decade grid.
	for d := int(math.Ceil(llo - 1e-9)); d <= int(math.Floor(lhi+1e-9)); d++ {
		xd := x(math.Pow(10, float64(d)))
		gc.vdash(xd, 4, clsGrid)
		pc.vdash(xd, 4, clsGrid)
	}
	// Reference lines: 0 dB and every −180° + k·360° in range.
	if 0 >= ga.lo && 0 <= ga.hi {
		gc.hdash(ga.y(0), 2, clsRef)
	}
	for _, r := range phaseRefs(pa) {
		pc.hdash(pa.y(r), 2, clsRef)
	}
	// Uncertainty bars.
	for _, p := range m.pts {
		if !p.Has {
			continue
		}
		xp := x(p.FreqHz)
		if s := math.Min(p.GainSigmaDB, barCapDB); s >= bigGainSigmaDB {
			if y0, y1 := ga.y(p.GainDB+s), ga.y(p.GainDB-s); y1-y0 >= 3 {
				gc.line(xp, y0, xp, y1, clsErr)
			}
		}
		if s := math.Min(p.PhaseSigmaDeg, barCapDeg); s >= bigPhaseSigmaDeg {
			if y0, y1 := pa.y(p.PhaseDeg+s), pa.y(p.PhaseDeg-s); y1-y0 >= 3 {
				pc.line(xp, y0, xp, y1, clsErr)
			}
		}
	}
	// The curve through the chosen attempts.
	px, pg, pp, have := 0, 0, 0, false
	for _, p := range m.pts {
		if !p.Has {
			continue
		}
		xp, yg, yp := x(p.FreqHz), ga.y(p.GainDB), pa.y(p.PhaseDeg)
		if have {
			gc.line(px, pg, xp, yg, clsData)
			pc.line(px, pp, xp, yp, clsData)
		} else {
			gc.set(xp, yg, clsData)
			pc.set(xp, yp, clsData)
		}
		px, pg, pp, have = xp, yg, yp, true
	}
	// Crossovers: the phase margin as a segment from the reference line
	// to the phase at each gain crossover, the gain margin as a segment
	// from 0 dB to the gain at each phase crossover.
	if m.haveMargins {
		for _, c := range m.margins.GainCrossovers {
			if !(c.FreqHz > 0) {
				continue
			}
			xc := x(c.FreqHz)
			if phase, ok := interpPhase(m.pts, c.FreqHz); ok {
				ref := phase - c.PhaseMarginDeg
				pc.line(xc, pa.y(ref), xc, pa.y(phase), clsMargin)
			}
			gc.mark(xc, ga.y(0), glyphCrossover, clsMargin)
		}
		for _, c := range m.margins.PhaseCrossovers {
			if !(c.FreqHz > 0) {
				continue
			}
			xc := x(c.FreqHz)
			gc.line(xc, ga.y(0), xc, ga.y(-c.GainMarginDB), clsMargin)
			if phase, ok := interpPhase(m.pts, c.FreqHz); ok {
				ref := math.Round((phase+180)/360)*360 - 180
				pc.mark(xc, pa.y(ref), glyphCrossover, clsMargin)
			}
		}
	}
	// Point markers by quality.
	for _, p := range m.pts {
		if !p.Has || p.Quality == qGood {
			continue
		}
		g, k := glyphRetried, clsRetried
		if p.Quality == qFlagged {
			g, k = glyphFlagged, clsFlagged
		}
		xp := x(p.FreqHz)
		gc.mark(xp, clampInt(ga.y(p.GainDB), 0, gc.dotH()-1), g, k)
		pc.mark(xp, clampInt(pa.y(p.PhaseDeg), 0, pc.dotH()-1), g, k)
	}
	if m.active >= 0 && m.active < len(m.pts) && m.pts[m.active].FreqHz > 0 {
		gc.mark(x(m.pts[m.active].FreqHz), 0, glyphActive, clsActive)
	}
	if m.cursor >= 0 && m.cursor < len(m.pts) && m.pts[m.cursor].FreqHz > 0 {
		p := m.pts[m.cursor]
		xc := x(p.FreqHz)
		gc.vdash(xc, 3, clsCursor)
		pc.vdash(xc, 3, clsCursor)
		if p.Has {
			gc.mark(xc, ga.y(p.GainDB), glyphCursor, clsCursor)
			pc.mark(xc, pa.y(p.PhaseDeg), glyphCursor, clsCursor)
		}
	}

	var b strings.Builder
	b.Grow(m.w * m.h * 6)
	writePane := func(rows, labels []string) {
		for r, row := range rows {
			l := labels[r]
			edge := "│"
			if l != "" {
				edge = "┤"
			}
			b.WriteString(m.st.paint[clsGrid].pre)
			b.WriteString(padLeft(l, lw-1))
			b.WriteString(edge)
			b.WriteString(m.st.paint[clsGrid].post)
			b.WriteString(row)
			b.WriteByte('\n')
		}
	}
	writePane(gc.rows(&m.st.paint), gLabels)
	writePane(pc.rows(&m.st.paint), pLabels)
	b.WriteString(m.st.paint[clsGrid].pre)
	b.WriteString(padLeft("Hz", lw-1))
	b.WriteString("└")
	b.WriteString(freqAxis(llo, lhi, cw, xdots, x))
	b.WriteString(m.st.paint[clsGrid].post)
	return b.String()
}

// tickLabels returns one label per cell row, empty where no tick falls.
// The reference values are labelled first; another tick is dropped when
// it would sit on or next to a labelled row.
func tickLabels(a axis, rows int, unit string, refs []float64) []string {
	out := make([]string, rows)
	taken := make([]bool, rows)
	put := func(v float64) {
		r := a.y(v) / 4
		if r < 0 || r >= rows || taken[r] || (r > 0 && taken[r-1]) || (r+1 < rows && taken[r+1]) {
			return
		}
		out[r] = fmt.Sprintf("%g%s", v+0, unit) // +0 turns −0 into 0
		taken[r] = true
	}
	for _, v := range refs {
		if v >= a.lo && v <= a.hi {
			put(v)
		}
	}
	for v := a.hi; v >= a.lo-a.step/2; v -= a.step {
		put(v)
	}
	return out
}

// phaseRefs lists −180° + k·360° inside the axis.
func phaseRefs(a axis) []float64 {
	var out []float64
	for r := math.Ceil((a.lo+180)/360)*360 - 180; r <= a.hi; r += 360 {
		out = append(out, r)
	}
	return out
}

// interpPhase interpolates the displayed (unwrapped) phase at f, linear
// in log frequency between the neighbouring measured points.
func interpPhase(pts []pointView, f float64) (float64, bool) {
	var prev *pointView
	for i := range pts {
		p := &pts[i]
		if !p.Has {
			continue
		}
		if p.FreqHz == f {
			return p.PhaseDeg, true
		}
		if prev != nil && prev.FreqHz < f && f < p.FreqHz {
			t := math.Log(f/prev.FreqHz) / math.Log(p.FreqHz/prev.FreqHz)
			return prev.PhaseDeg + t*(p.PhaseDeg-prev.PhaseDeg), true
		}
		prev = p
	}
	return 0, false
}

// freqAxis writes the decade labels, each centred under its grid line,
// dropping one that would touch its neighbour.
func freqAxis(llo, lhi float64, cw, xdots int, x func(float64) int) string {
	row := []rune(strings.Repeat("─", cw))
	next := 0
	for d := int(math.Ceil(llo - 1e-9)); d <= int(math.Floor(lhi+1e-9)); d++ {
		l := []rune(decadeLabel(d))
		c := x(math.Pow(10, float64(d))) / 2
		start := c - len(l)/2
		start = max(start, 0)
		if start+len(l) > cw {
			start = cw - len(l)
		}
		if start < next || start < 0 {
			continue
		}
		copy(row[start:], l)
		next = start + len(l) + 1
	}
	return string(row)
}

func padLeft(s string, w int) string {
	n := len([]rune(s))
	if n >= w {
		return string([]rune(s)[:w])
	}
	return strings.Repeat(" ", w-n) + s
}

// fitBlock writes msg into a w×h block of plain lines.
func fitBlock(msg string, w, h int) string {
	if w <= 0 || h <= 0 {
		return ""
	}
	lines := make([]string, h)
	for i := range lines {
		lines[i] = strings.Repeat(" ", w)
	}
	lines[0] = padRight(msg, w)
	return strings.Join(lines, "\n")
}

func padRight(s string, w int) string {
	r := []rune(s)
	if len(r) >= w {
		return string(r[:w])
	}
	return s + strings.Repeat(" ", w-len(r))
}

func clampInt(v, lo, hi int) int { return min(max(v, lo), hi) }
