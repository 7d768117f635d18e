package tui

import (
	"fmt"
	"path/filepath"
	"strings"
	"time"

	tea "github.com/charmbracelet/bubbletea"
)

// statusInfo is what the status lines show; the root fills it.
type statusInfo struct {
	State    string // RUNNING, PAUSED, …
	Bad      bool   // the state is an error
	Waiting  string // what the engine does about a fault, after the state
	K, N     int    // point k of N
	HaveTime bool
	Elapsed  time.Duration
	HaveETA  bool
	ETA      time.Duration
	File     string
	ReadOnly bool
	Flash    string // the last command's result
	FlashBad bool
	StateMsg string // why the engine failed or stopped
	GenIDN   string
	DigIDN   string
}

// statusModel is the status panel: two lines at the top of the screen.
type statusModel struct {
	st   *styles
	w    int
	info statusInfo
}

func newStatus(st *styles) statusModel { return statusModel{st: st} }

func (m *statusModel) SetSize(w int)       { m.w = w }
func (m *statusModel) Set(info statusInfo) { m.info = info }

func (m statusModel) Update(msg tea.Msg) (statusModel, tea.Cmd) { return m, nil }

// View is the state, progress, time and file; then the last message, the
// reason the engine stopped, or the instruments' identities.
func (m statusModel) View() string {
	in := m.info
	state := m.st.title.Render(in.State)
	if in.Bad {
		state = m.st.bad.Render(in.State)
	}
	parts := []string{state}
	if in.Waiting != "" {
		parts = append(parts, m.st.warn.Render(in.Waiting))
	}
	parts = append(parts, fmt.Sprintf("point %d of %d", in.K, in.N))
	if in.HaveTime {
		parts = append(parts, "elapsed "+formatDuration(in.Elapsed))
	}
	if in.HaveETA {
		parts = append(parts, "ETA "+formatDuration(in.ETA))
	}
	if in.File != "" {
		parts = append(parts, "file "+filepath.Base(in.File))
	}
	if in.ReadOnly {
		parts = append(parts, "read-only")
	}
	var line2 string
	switch {
	case in.Flash != "" && in.FlashBad:
		line2 = m.st.bad.Render(in.Flash)
	case in.Flash != "":
		line2 = m.st.good.Render(in.Flash)
	case in.StateMsg != "":
		line2 = in.State + ": " + in.StateMsg
	default:
		line2 = m.st.dim.Render(fmt.Sprintf("gen %s · dig %s", orDash(in.GenIDN), orDash(in.DigIDN)))
	}
	return fitLine(strings.Join(parts, " · "), m.w) + "\n" + fitLine(line2, m.w)
}

func orDash(s string) string {
	if strings.TrimSpace(s) == "" {
		return "—"
	}
	return strings.TrimSpace(s)
}

// shortDuration rounds d for a message: to 10 ms below a second, to
// 100 ms above (250ms, 1.5s, 2m0s).
func shortDuration(d time.Duration) time.Duration {
	if d < time.Second {
		return d.Round(10 * time.Millisecond)
	}
	return d.Round(100 * time.Millisecond)
}
