package tui

import (
	"testing"
	"time"

	tea "github.com/charmbracelet/bubbletea"
	"github.com/charmbracelet/x/ansi"

	"loopsweep/sweep"
)

// FuzzKeys types arbitrary key sequences at arbitrary sizes: the screen
// must never panic and every frame must keep its size.
func FuzzKeys(f *testing.F) {
	f.Add("q n e\tabc\r\x1b ? R r hhll gG", uint8(80), uint8(24))
	f.Add("e\x7f\x7f\x7f\x7f9\r", uint8(200), uint8(50))
	f.Add("n note text\r s", uint8(30), uint8(8))
	f.Fuzz(func(t *testing.T, typed string, w, h uint8) {
		ctl := &fakeController{snap: testSession(12, 3)}
		m := New(Options{Controller: ctl, Session: testSession(31, 20), Renderer: plainRenderer(), State: sweep.Running})
		mm, _ := m.Update(tea.WindowSizeMsg{Width: int(w), Height: int(h)})
		m = mm.(Model)
		for _, r := range typed {
			var k tea.KeyMsg
			switch r {
			case '\r':
				k = tea.KeyMsg{Type: tea.KeyEnter}
			case '\t':
				k = tea.KeyMsg{Type: tea.KeyTab}
			case '\x1b':
				k = tea.KeyMsg{Type: tea.KeyEsc}
			case '\x7f':
				k = tea.KeyMsg{Type: tea.KeyBackspace}
			case ' ':
				k = tea.KeyMsg{Type: tea.KeySpace, Runes: []rune{' '}}
			default:
				k = tea.KeyMsg{Type: tea.KeyRunes, Runes: []rune{r}}
			}
			mm, cmd := m.Update(k)
			m = mm.(Model)
			for _, msg := range runWithin([]tea.Cmd{cmd}, 2*time.Millisecond) {
				if _, ok := msg.(stoppedMsg); ok {
					return
				}
				mm, _ = m.Update(msg)
				m = mm.(Model)
			}
		}
		if w > 0 && h > 0 {
			lines := 1
			for _, c := range m.View() {
				if c == '\n' {
					lines++
				}
			}
			if lines != int(h) {
				t.Fatalf("frame has %d lines at height %d", lines, h)
			}
			_ = ansi.Strip(m.View())
		}
	})
}
