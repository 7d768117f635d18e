package tui

import (
	"errors"
	"fmt"
	"strconv"
	"strings"

	"github.com/charmbracelet/bubbles/key"
	"github.com/charmbracelet/bubbles/textinput"
	tea "github.com/charmbracelet/bubbletea"

	"loopsweep/sweep"
)

// formField is one line of the settings form.
type formField struct {
	label string
	hint  string
	in    textinput.Model
}

// formModel edits the sweep settings a user changes most: start, stop,
// points per decade, amplitude, cycles per record and settling cycles.
type formModel struct {
	st     *styles
	keys   dialogKeys
	base   sweep.Settings
	fields []formField
	focus  int
	err    string
	w      int
}

const (
	fStart = iota
	fStop
	fPerDecade
	fAmp
	fCycles
	fSettle
)

func newForm(st *styles, keys dialogKeys, s sweep.Settings) formModel {
	mk := func(label, hint, value string) formField {
		in := textinput.New()
		in.Prompt = ""
		in.CharLimit = 24
		in.Width = 16
		in.SetValue(value)
		return formField{label: label, hint: hint, in: in}
	}
	pd := s.PerDecade
	if pd <= 0 {
		pd = sweep.DefaultPerDecade
	}
	f := formModel{st: st, keys: keys, base: s}
	f.fields = []formField{
		fStart:     mk("start", "Hz, e.g. 100 or 1k", trimFloat(s.StartHz)),
		fStop:      mk("stop", "Hz, e.g. 20k", trimFloat(s.StopHz)),
		fPerDecade: mk("points/decade", "whole number", strconv.Itoa(pd)),
		fAmp:       mk("amplitude", fmt.Sprintf("Vpp, at most %g", s.MaxAmpVpp), trimFloat(s.AmpVpp)),
		fCycles:    mk("cycles/record", "whole number", strconv.Itoa(s.Cycles)),
		fSettle:    mk("settling", "cycles after each change", trimFloat(s.SettleCycles)),
	}
	f.fields[0].in.Focus()
	return f
}

func trimFloat(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }

// Settings parses the fields into a copy of the base settings and checks
// them with the engine's own validation. The plan becomes a log sweep
// (any explicit list or linear step is dropped).
func (f formModel) Settings() (sweep.Settings, error) {
	s := f.base
	val := func(i int) string { return strings.TrimSpace(f.fields[i].in.Value()) }
	var err error
	if s.StartHz, err = sweep.ParseSI(val(fStart), "Hz"); err != nil {
		return s, fmt.Errorf("start: %w", err)
	}
	if s.StopHz, err = sweep.ParseSI(val(fStop), "Hz"); err != nil {
		return s, fmt.Errorf("stop: %w", err)
	}
	if s.PerDecade, err = strconv.Atoi(val(fPerDecade)); err != nil {
		return s, fmt.Errorf("points/decade %q: not a whole number", val(fPerDecade))
	}
	if s.AmpVpp, err = sweep.ParseSI(val(fAmp), "Vpp"); err != nil {
		return s, fmt.Errorf("amplitude: %w", err)
	}
	if s.Cycles, err = strconv.Atoi(val(fCycles)); err != nil {
		return s, fmt.Errorf("cycles/record %q: not a whole number", val(fCycles))
	}
	if s.SettleCycles, err = sweep.ParseSI(val(fSettle), ""); err != nil {
		return s, fmt.Errorf("settling: %w", err)
	}
	s.Frequencies, s.LinearStep = nil, 0
	if s.StopHz <= s.StartHz {
		return s, fmt.Errorf("stop %g Hz must be above start %g Hz", s.StopHz, s.StartHz)
	}
	if s.AmpVpp > s.MaxAmpVpp && s.MaxAmpVpp > 0 {
		return s, fmt.Errorf("amplitude %g Vpp is above the cap %g Vpp", s.AmpVpp, s.MaxAmpVpp)
	}
	if err := s.Validate(); err != nil {
		var se *sweep.SettingError
		if errors.As(err, &se) {
			return s, fmt.Errorf("%s: %s", se.Setting, se.Msg)
		}
		return s, err
	}
	return s, nil
}

// SetError shows err under the form.
func (f *formModel) SetError(err error) {
	f.err = ""
	if err != nil {
		f.err = err.Error()
	}
}

func (f *formModel) move(d int) {
	f.fields[f.focus].in.Blur()
	f.focus = (f.focus + d + len(f.fields)) % len(f.fields)
	f.fields[f.focus].in.Focus()
}

// Update moves between fields and types into the focused one; the root
// handles submit and cancel.
func (f formModel) Update(msg tea.Msg) (formModel, tea.Cmd) {
	if k, ok := msg.(tea.KeyMsg); ok {
		switch {
		case key.Matches(k, f.keys.Next):
			f.move(1)
			return f, nil
		case key.Matches(k, f.keys.Prev):
			f.move(-1)
			return f, nil
		}
	}
	var cmd tea.Cmd
	f.fields[f.focus].in, cmd = f.fields[f.focus].in.Update(msg)
	return f, cmd
}

func (f formModel) View() string {
	lines := []string{f.st.title.Render("Sweep settings"), ""}
	for i, fl := range f.fields {
		mark := "  "
		if i == f.focus {
			mark = "> "
		}
		lines = append(lines, fmt.Sprintf("%s%-14s %s  %s", mark, fl.label, padRight(fl.in.View(), 17), f.st.dim.Render(fl.hint)))
	}
	lines = append(lines, "")
	if f.err != "" {
		lines = append(lines, f.st.bad.Render("error: "+f.err))
	} else {
		lines = append(lines, f.st.dim.Render("applies to points not yet measured"))
	}
	lines = append(lines, f.st.dim.Render("tab/↓ next · shift+tab/↑ previous · enter apply · esc cancel"))
	return strings.Join(lines, "\n")
}
