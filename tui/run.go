package tui

import (
	"fmt"

	tea "github.com/charmbracelet/bubbletea"
)

// Run shows the bench screen on the terminal until the user quits. The
// model stops the engine (turning the output off) before it quits;
// callers should still call Stop afterwards, for the exits the screen
// cannot see (a failed terminal, a signal).
func Run(o Options) error {
	p := tea.NewProgram(New(o), tea.WithAltScreen())
	if _, err := p.Run(); err != nil {
		return fmt.Errorf("bench screen: %w", err)
	}
	return nil
}
