package tui

import (
	"math"
	"strings"
	"testing"

	"loopsweep/sweep"
)

// runeCol returns the cell column of the first r in line, or −1.
func runeCol(line string, r rune) int {
	for i, c := range []rune(line) {
		if c == r {
			return i
		}
	}
	return -1
}

// TestCursorLinksPlotAndTable moves the cursor and checks that the table
// selects the same point the plot marks, at the column a log axis puts
// that frequency.
func TestCursorLinksPlotAndTable(t *testing.T) {
	m := newTest(t, &fakeController{}, 80, 24)
	m, _ = send(t, m, eventsMsg{evs: []sweep.Event{sweep.PointStarted{Index: 25, FreqHz: m.sess.Points[25].FreqHz}}})
	m, _ = send(t, m, keys("g", "l", "l", "l", "l", "l", "l", "l", "l", "l", "l")...) // point 11 (index 10)
	lines := strings.Split(plain(m), "\n")
	// The table row marked '>' is point 11.
	found := false
	for _, l := range lines {
		if i := strings.Index(l, ">"); i >= 0 && strings.HasPrefix(strings.TrimSpace(l[i+1:]), "11 ") {
			found = true
		}
	}
	if !found {
		t.Errorf("table does not select point 11:\n%s", plain(m))
	}
	// The plot: the axis row gives the label width; 100 Hz to 100 kHz is
	// three decades, so f sits at log10(f/100)/3 of the dot columns.
	var axis string
	for _, l := range lines {
		if strings.Contains(l, "Hz└") {
			axis = l
		}
	}
	lw := runeCol(axis, '└') + 1
	cw := 80 - lw
	col := func(f float64) int {
		return lw + int(math.Round(math.Log10(f/100)/3*float64(2*cw-1)))/2
	}
	want := col(m.sess.Points[10].FreqHz)
	marks := 0
	for _, l := range lines[2:14] {
		if c := runeCol(l, glyphCursor); c >= 0 {
			marks++
			if c != want {
				t.Errorf("cursor mark at column %d, want %d (%.0f Hz)", c, want, m.sess.Points[10].FreqHz)
			}
		}
	}
	if marks != 2 {
		t.Errorf("%d cursor marks in the plot, want one per pane", marks)
	}
	// The point being measured (index 25) is marked at the top of the
	// gain pane, and '*' in the table.
	if c := runeCol(lines[2], glyphActive); c != col(m.sess.Points[25].FreqHz) {
		t.Errorf("measuring mark at column %d, want %d", c, col(m.sess.Points[25].FreqHz))
	}
}
