package tui

import (
	"fmt"
	"math"
	"math/cmplx"
	"os"
	"strings"
	"testing"
	"time"

	tea "github.com/charmbracelet/bubbletea"
	"github.com/charmbracelet/lipgloss"
	"github.com/charmbracelet/x/ansi"
	"github.com/muesli/termenv"

	"loopsweep/analysis"
	"loopsweep/sweep"
)

// plotOf renders the plot panel alone for the test session.
func plotOf(t *testing.T, st *styles, s sweep.Session, w, h, cursor int, mg *analysis.Margins) []string {
	t.Helper()
	p := newPlot(st)
	p.SetSize(w, h)
	p.SetData(viewPoints(&s), s.Settings.StartHz, s.Settings.StopHz)
	p.SetCursor(cursor, -1)
	if mg != nil {
		p.SetMargins(*mg, true)
	}
	return strings.Split(p.View(), "\n")
}

func TestPlotFrequencyAxis(t *testing.T) {
	st := newStyles(plainRenderer())
	s := testSession(31, 31)
	lines := plotOf(t, &st, s, 100, 21, -1, nil)
	axis := []rune(lines[len(lines)-1])
	lw := strings.IndexRune(string(axis), '└')
	lw = len([]rune(string(axis)[:lw])) + 1
	cw := 100 - lw
	// Each decade label is centred on log10(f/100)/3 of the axis (100 Hz
	// to 100 kHz is three decades), computed here from the definition of
	// a log axis.
	for _, d := range []struct {
		label string
		f     float64
	}{{"100", 100}, {"1k", 1e3}, {"10k", 1e4}, {"100k", 1e5}} {
		frac := math.Log10(d.f/100) / 3
		centre := int(math.Round(frac*float64(2*cw-1))) / 2
		i := strings.Index(string(axis[lw:]), d.label)
		if i < 0 {
			t.Errorf("axis %q lacks %q", string(axis), d.label)
			continue
		}
		start := len([]rune(string(axis[lw:])[:i]))
		if centre < start-1 || centre > start+len(d.label) {
			t.Errorf("label %q at cells %d..%d, want it over cell %d", d.label, start, start+len(d.label)-1, centre)
		}
	}
	// The decade grid: a dotted column in every pane row at 1 kHz.
	c1k := int(math.Round(math.Log10(10)/3*float64(2*cw-1))) / 2
	for r := 0; r < len(lines)-1; r++ {
		row := []rune(lines[r])
		if row[lw+c1k] < 0x2800 || row[lw+c1k] > 0x28ff {
			t.Errorf("row %d has no braille grid dot at the 1 kHz column: %q", r, string(row))
		}
	}
}

func TestPlotReferenceLines(t *testing.T) {
	st := newStyles(plainRenderer())
	s := testSession(31, 31)
	lines := plotOf(t, &st, s, 100, 21, -1, nil)
	var zero, m180 int = -1, -1
	for i, l := range lines {
		if strings.HasPrefix(strings.TrimSpace(l), "0dB┤") {
			zero = i
		}
		if strings.HasPrefix(strings.TrimSpace(l), "-180°┤") {
			m180 = i
		}
	}
	if zero < 0 || m180 < 0 {
		t.Fatalf("no 0 dB or −180° label:\n%s", strings.Join(lines, "\n"))
	}
	// A dashed reference line fills its row: at least half its cells
	// hold dots.
	for _, r := range []int{zero, m180} {
		row := []rune(lines[r])
		n := 0
		for _, c := range row {
			if c > 0x2800 && c <= 0x28ff {
				n++
			}
		}
		if n < len(row)/2 {
			t.Errorf("row %d has %d dotted cells of %d: no reference line", r, n, len(row))
		}
	}
	if zero >= m180 {
		t.Errorf("gain pane (0 dB on row %d) not above phase pane (−180° on row %d)", zero, m180)
	}
}

func TestPlotGlyphsWithoutColour(t *testing.T) {
	st := newStyles(plainRenderer())
	s := testSession(31, 31)
	out := strings.Join(plotOf(t, &st, s, 100, 21, 10, nil), "\n")
	if strings.ContainsRune(out, '\x1b') {
		t.Fatal("plain renderer produced escape sequences")
	}
	// Point 3 was retried, point 5 flagged (testSession), point 10 is the
	// cursor: each shows its own glyph in both panes.
	for _, g := range []rune{glyphRetried, glyphFlagged, glyphCursor} {
		if n := strings.Count(out, string(g)); n < 2 {
			t.Errorf("glyph %q appears %d times, want once per pane", g, n)
		}
	}
	if glyphRetried == glyphFlagged || glyphRetried == glyphCursor || glyphFlagged == glyphCursor {
		t.Error("quality glyphs are not distinct")
	}
	// The flagged point has σ = 3 dB: an uncertainty bar of about ±3 dB
	// is drawn (its extent checked in the colour test through its class).

	// With colour, the classes get escape sequences and the glyphs stay.
	cst := newStyles(colourRenderer())
	col := strings.Join(plotOf(t, &cst, s, 100, 21, 10, nil), "\n")
	if !strings.ContainsRune(col, '\x1b') {
		t.Error("colour renderer produced no escape sequences")
	}
	if ansi.Strip(col) != out {
		t.Error("colour and plain plots differ once escapes are stripped")
	}
}

// envRenderer is a renderer that detects its colour profile from the
// environment as on a terminal (the output is taken to be a TTY).
func envRenderer() *lipgloss.Renderer {
	return lipgloss.NewRenderer(os.Stdout, termenv.WithTTY(true))
}

func TestNoColorEnvironment(t *testing.T) {
	// NO_COLOR (no-color.org) is honoured by termenv, which lipgloss's
	// renderer asks when no profile is set explicitly. First the control:
	// the same terminal without NO_COLOR gets colour.
	t.Setenv("TERM", "xterm-256color")
	t.Setenv("COLORTERM", "")
	t.Setenv("NO_COLOR", "")
	m := New(Options{Controller: &fakeController{}, Session: testSession(31, 31), Renderer: envRenderer(), State: sweep.Running})
	m, _ = send(t, m, tea.WindowSizeMsg{Width: 80, Height: 24})
	if !strings.ContainsRune(m.View(), '\x1b') {
		t.Fatal("control: a 256-colour terminal got no escape sequences")
	}
	t.Setenv("NO_COLOR", "1")
	r := envRenderer()
	m = New(Options{Controller: &fakeController{}, Session: testSession(31, 31), Renderer: r, State: sweep.Running})
	m, _ = send(t, m, tea.WindowSizeMsg{Width: 80, Height: 24})
	if strings.ContainsRune(m.View(), '\x1b') {
		t.Error("NO_COLOR set but the frame has escape sequences")
	}
	for _, g := range []string{string(glyphRetried), string(glyphFlagged), "x!", "o2"} {
		if !strings.Contains(m.View(), g) {
			t.Errorf("NO_COLOR frame lacks %q", g)
		}
	}
}

func TestPlotUncertaintyBar(t *testing.T) {
	st := newStyles(plainRenderer())
	s := testSession(31, 31)
	// Make point 20 (10 kHz) very uncertain in phase: σ = 60°.
	s.Points[20].Attempts[0].PhaseSigmaDeg = 60
	with := plotOf(t, &st, s, 100, 21, -1, nil)
	s.Points[20].Attempts[0].PhaseSigmaDeg = 0.3
	without := plotOf(t, &st, s, 100, 21, -1, nil)
	changed := 0
	for i := range with {
		if with[i] != without[i] {
			changed++
		}
	}
	// ±60° on a phase pane of 10 rows spanning a few hundred degrees
	// covers several rows.
	if changed < 3 {
		t.Errorf("a ±60° bar changed %d rows, want at least 3", changed)
	}
}

// The test loop's margins in closed form (helpers_test.go):
// phase crossover where atan(f/fp1) + atan(f/fp2) = 90°, i.e. f² = fp1·fp2
// (tan(a+b) infinite when tan a · tan b = 1); gain crossover found by
// bisection on |L| = 1.
func testLoopMargins() (fc, pm, f180, gm float64) {
	lo, hi := 100.0, 10e3
	for range 200 {
		mid := math.Sqrt(lo * hi)
		if cmplx.Abs(testLoop(mid)) > 1 {
			lo = mid
		} else {
			hi = mid
		}
	}
	fc = lo
	pm = 180 + cmplx.Phase(testLoop(fc))*180/math.Pi
	f180 = math.Sqrt(testFp1 * testFp2)
	gm = -20 * math.Log10(cmplx.Abs(testLoop(f180)))
	return
}

func TestMarginsShownMatchClosedForm(t *testing.T) {
	fc, pm, f180, gm := testLoopMargins()
	m := newTest(t, &fakeController{}, 120, 40)
	// Make every point measured, then redraw.
	full := testSession(31, 31)
	var evs []sweep.Event
	for i, p := range full.Points {
		evs = append(evs, sweep.PointMeasured{Index: i, Point: p})
	}
	m, _ = send(t, m, eventsMsg{evs: evs}, tickMsg(testT0.Add(40*time.Second)))
	if len(m.margins.GainCrossovers) != 1 || len(m.margins.PhaseCrossovers) != 1 {
		t.Fatalf("margins %+v (err %v), want one crossing each", m.margins, m.mErr)
	}
	g, p := m.margins.GainCrossovers[0], m.margins.PhaseCrossovers[0]
	// Tolerances: ten points per decade interpolated in log frequency
	// put the crossings within about 1 % and the margins within a few
	// tenths (the curves bend little over a tenth of a decade).
	const relF, tolDeg, tolDB = 0.01, 0.3, 0.2
	if math.Abs(g.FreqHz/fc-1) > relF || math.Abs(g.PhaseMarginDeg-pm) > tolDeg {
		t.Errorf("fc %g Hz PM %g°, want %g Hz %g° (closed form)", g.FreqHz, g.PhaseMarginDeg, fc, pm)
	}
	if math.Abs(p.FreqHz/f180-1) > relF || math.Abs(p.GainMarginDB-gm) > tolDB {
		t.Errorf("f180 %g Hz GM %g dB, want %g Hz %g dB (closed form)", p.FreqHz, p.GainMarginDB, f180, gm)
	}
	// And the panel prints them at one decimal.
	s := plain(m)
	for _, want := range []string{
		"PM    " + strconv1(g.PhaseMarginDeg) + "°",
		"GM    " + strconv1(p.GainMarginDB) + " dB",
		"f180  " + formatHz(p.FreqHz) + " Hz",
		"fc    " + formatHz(g.FreqHz) + " Hz",
		"verdict: meets targets",
	} {
		if !strings.Contains(s, want) {
			t.Errorf("screen lacks %q", want)
		}
	}
	// Both crossovers are marked on the plot.
	if n := strings.Count(s, string(glyphCrossover)); n < 2 {
		t.Errorf("%d crossover marks, want 2", n)
	}
}

func strconv1(x float64) string { return fmt.Sprintf("%.1f", x) }

func TestPlotScaleIgnoresWildFlaggedPoint(t *testing.T) {
	st := newStyles(plainRenderer())
	s := testSession(31, 31)
	base := plotOf(t, &st, s, 100, 21, -1, nil)
	// Point 5 is flagged (testSession); make its reading absurd.
	s.Points[5].Attempts[0].GainDB = 200
	s.Points[5].Attempts[1].GainDB = 200
	s.Points[5].Attempts[2].GainDB = 200
	wild := plotOf(t, &st, s, 100, 21, -1, nil)
	labels := func(lines []string) string {
		var b strings.Builder
		for _, l := range lines {
			if i := strings.IndexAny(l, "┤│└"); i >= 0 {
				b.WriteString(l[:i] + "\n")
			}
		}
		return b.String()
	}
	if labels(base) != labels(wild) {
		t.Errorf("a flagged 200 dB point changed the axis:\n%s\nvs\n%s", labels(base), labels(wild))
	}
	if !strings.ContainsRune(strings.Join(wild[:10], "\n"), glyphFlagged) {
		t.Error("the flagged point's mark is not drawn (clamped to the pane's edge)")
	}
}
