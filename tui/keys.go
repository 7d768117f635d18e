package tui

import "github.com/charmbracelet/bubbles/key"

// KeyMap holds every binding of the bench screen; help is drawn from it,
// so the help bar says what the keys do.
type KeyMap struct {
	Pause     key.Binding
	Left      key.Binding
	Right     key.Binding
	First     key.Binding
	Last      key.Binding
	Remeasure key.Binding
	Flagged   key.Binding
	Edit      key.Binding
	Note      key.Binding
	Save      key.Binding
	Help      key.Binding
	Quit      key.Binding
	ForceQuit key.Binding
}

// DefaultKeyMap returns the bench screen's bindings.
func DefaultKeyMap() KeyMap {
	return KeyMap{
		Pause:     key.NewBinding(key.WithKeys(" "), key.WithHelp("space", "pause/resume")),
		Left:      key.NewBinding(key.WithKeys("left", "h"), key.WithHelp("←/h", "previous point")),
		Right:     key.NewBinding(key.WithKeys("right", "l"), key.WithHelp("→/l", "next point")),
		First:     key.NewBinding(key.WithKeys("home", "g"), key.WithHelp("g/home", "first point")),
		Last:      key.NewBinding(key.WithKeys("end", "G"), key.WithHelp("G/end", "follow the sweep")),
		Remeasure: key.NewBinding(key.WithKeys("r"), key.WithHelp("r", "re-measure point")),
		Flagged:   key.NewBinding(key.WithKeys("R"), key.WithHelp("R", "re-measure flagged")),
		Edit:      key.NewBinding(key.WithKeys("e"), key.WithHelp("e", "edit settings")),
		Note:      key.NewBinding(key.WithKeys("n"), key.WithHelp("n", "add note")),
		Save:      key.NewBinding(key.WithKeys("s"), key.WithHelp("s", "save")),
		Help:      key.NewBinding(key.WithKeys("?"), key.WithHelp("?", "more keys")),
		Quit:      key.NewBinding(key.WithKeys("q"), key.WithHelp("q", "quit")),
		ForceQuit: key.NewBinding(key.WithKeys("ctrl+c"), key.WithHelp("ctrl+c", "stop and quit")),
	}
}

// ShortHelp is the one-line help bar.
func (k KeyMap) ShortHelp() []key.Binding {
	return []key.Binding{k.Pause, k.Left, k.Right, k.Remeasure, k.Edit, k.Save, k.Quit, k.Help}
}

// FullHelp is the help shown on '?'.
func (k KeyMap) FullHelp() [][]key.Binding {
	return [][]key.Binding{
		{k.Left, k.Right, k.First, k.Last},
		{k.Pause, k.Remeasure, k.Flagged, k.Edit},
		{k.Note, k.Save, k.Help, k.Quit, k.ForceQuit},
	}
}

// dialogKeys are the bindings of the form, the note and the prompts.
type dialogKeys struct {
	Next    key.Binding
	Prev    key.Binding
	Submit  key.Binding
	Cancel  key.Binding
	Yes     key.Binding
	No      key.Binding
	Forever key.Binding
}

func defaultDialogKeys() dialogKeys {
	return dialogKeys{
		Next:    key.NewBinding(key.WithKeys("tab", "down"), key.WithHelp("tab/↓", "next field")),
		Prev:    key.NewBinding(key.WithKeys("shift+tab", "up"), key.WithHelp("shift+tab/↑", "previous field")),
		Submit:  key.NewBinding(key.WithKeys("enter"), key.WithHelp("enter", "apply")),
		Cancel:  key.NewBinding(key.WithKeys("esc"), key.WithHelp("esc", "cancel")),
		Yes:     key.NewBinding(key.WithKeys("y", "Y", "enter"), key.WithHelp("y", "yes")),
		No:      key.NewBinding(key.WithKeys("n", "N", "esc"), key.WithHelp("n/esc", "no")),
		Forever: key.NewBinding(key.WithKeys("d"), key.WithHelp("d", "don't show again")),
	}
}
