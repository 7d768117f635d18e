package tui

import (
	"strings"
	"testing"
	"time"

	tea "github.com/charmbracelet/bubbletea"

	"loopsweep/sweep"
)

// frameBudget is the target for one frame (View of 500 points at
// 200×50).
const frameBudget = 2 * time.Millisecond

// BenchmarkView measures a frame — laying out and drawing every panel —
// of a 500-point session at 200×50 with colour.
// It reports the time against the 2 ms budget (frame/budget, below 1
// meets it) and against a reference measured in the same run: building
// the same number of cells as plain strings, the least any renderer must
// do.
func BenchmarkView(b *testing.B) {
	s := testSession(500, 500)
	m := New(Options{Controller: &fakeController{}, Session: s, Renderer: colourRenderer(), State: sweep.Running})
	mm, _ := m.Update(tea.WindowSizeMsg{Width: 200, Height: 50})
	m = mm.(Model)

	// The reference, timed here (testing.Benchmark cannot nest).
	const refN = 200
	t0 := time.Now()
	for i := 0; i < refN; i++ {
		var sb strings.Builder
		for r := 0; r < 50; r++ {
			for c := 0; c < 200; c++ {
				sb.WriteRune('⣿')
			}
			sb.WriteByte('\n')
		}
		_ = sb.String()
	}
	refNs := float64(time.Since(t0).Nanoseconds()) / refN

	// Recomputing the points and margins happens once per tick in which
	// points arrived, not every frame; time it too, for the record.
	t0 = time.Now()
	for i := 0; i < 10; i++ {
		m.refresh()
	}
	refreshMs := float64(time.Since(t0).Microseconds()) / 10 / 1000

	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		m.draw()
	}
	b.StopTimer()
	b.ReportMetric(refreshMs, "refresh-ms")
	perFrame := float64(b.Elapsed().Nanoseconds()) / float64(b.N)
	b.ReportMetric(perFrame/float64(frameBudget.Nanoseconds()), "frame/2ms")
	b.ReportMetric(perFrame/refNs, "frame/plain-cells")
	if !strings.Contains(m.View(), "Margins") {
		b.Fatal("frame lacks the margins panel")
	}
}
