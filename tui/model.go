package tui

import (
	"fmt"
	"strings"
	"time"

	"github.com/charmbracelet/bubbles/help"
	"github.com/charmbracelet/bubbles/key"
	"github.com/charmbracelet/bubbles/textinput"
	tea "github.com/charmbracelet/bubbletea"
	"github.com/charmbracelet/lipgloss"

	"loopsweep/analysis"
	"loopsweep/sweep"
)

// Controller is what the screen asks of the engine; *sweep.Engine
// satisfies it. Each method returns promptly (the engine acts on its own
// goroutine); the screen calls them from Cmds, never from Update.
type Controller interface {
	Pause()
	Resume()
	// Stop ends the sweep and turns the generator's output off.
	Stop()
	Remeasure(i int, override *sweep.Settings) error
	RemeasureFlagged(override *sweep.Settings) (int, error)
	UpdateSettings(s sweep.Settings) error
	AddNote(text string)
	Save() error
	// Snapshot copies the session (after settings changes add points).
	Snapshot() sweep.Session
}

var _ Controller = (*sweep.Engine)(nil)

// Options configure the screen. The zero value browses an empty session.
type Options struct {
	// Controller drives a live sweep; nil browses read-only.
	Controller Controller
	// Events is the engine's event stream; nil means nothing is live.
	Events <-chan sweep.Event
	// Session is what is known at the start: the plan, or a loaded file.
	Session sweep.Session
	// SessionFile is shown in the status line.
	SessionFile string
	// State is the engine's state at the start; zero (Idle) with a
	// Controller, Done without one are sensible.
	State sweep.State
	// PMTargetDeg and GMTargetDB are the verdict's targets; zero means
	// DefaultPMTargetDeg and DefaultGMTargetDB.
	PMTargetDeg, GMTargetDB float64
	// ShowSafety shows the first-run safety note; ConfigDir is where its
	// dismissal is remembered ("" remembers nothing).
	ShowSafety bool
	ConfigDir  string
	// Renderer styles the screen; nil means lipgloss's default renderer
	// for stdout, which honours NO_COLOR.
	Renderer *lipgloss.Renderer
	// SweepID stamps this sweep's event messages; messages carrying
	// another ID (a sweep that was replaced) are dropped.
	SweepID int
	// Tick is the redraw period; zero means 100 ms. Events are applied as
	// they come and drawn at the next tick, so a fast engine cannot make
	// the screen flicker.
	Tick time.Duration
}

// mode is what the screen is showing.
type mode int

const (
	modeBench       mode = iota // plot, margins, table
	modeSafety                  // the first-run note
	modeForm                    // editing the settings
	modeNote                    // typing a note
	modeConfirmQuit             // asking before stopping a running sweep
	modeQuitting                // waiting for Stop to return
)

// Messages.
type (
	eventsMsg struct {
		id  int
		evs []sweep.Event
	}
	eventsClosedMsg struct{ id int }
	tickMsg         time.Time
	// doneMsg reports a controller call: what it was and its error.
	doneMsg struct {
		what string
		err  error
	}
	settingsMsg struct{ err error }
	snapshotMsg struct{ s sweep.Session }
	stoppedMsg  struct{}
)

// maxBatch bounds how many queued events one message carries.
const maxBatch = 256

// listen reads one event (blocking), then whatever else is already
// queued, and returns them stamped with the sweep's ID.
func listen(id int, ch <-chan sweep.Event) tea.Cmd {
	if ch == nil {
		return nil
	}
	return func() tea.Msg {
		ev, ok := <-ch
		if !ok {
			return eventsClosedMsg{id}
		}
		evs := []sweep.Event{ev}
		for len(evs) < maxBatch {
			select {
			case ev, ok := <-ch:
				if !ok {
					return eventsMsg{id, evs} // the next listen sees the close
				}
				evs = append(evs, ev)
				continue
			default:
			}
			break
		}
		return eventsMsg{id, evs}
	}
}

func (m Model) tick() tea.Cmd {
	return tea.Tick(m.opt.Tick, func(t time.Time) tea.Msg { return tickMsg(t) })
}

// Model is the root of the bench screen.
type Model struct {
	opt   Options
	st    *styles
	keys  KeyMap
	dkeys dialogKeys
	help  help.Model
	w, h  int
	mode  mode

	sess     sweep.Session
	views    []pointView
	margins  analysis.Margins
	mErr     error
	state    sweep.State
	stateMsg string
	lost     lostInfo // the instrument fault being recovered from
	closed   bool     // the event stream ended
	cursor   int
	active   int
	follow   bool // the cursor follows the point being measured
	flash    string
	flashBad bool
	started  time.Time
	now      time.Time
	dirty    bool // the session changed: recompute points and margins

	plot    plotModel
	status  statusModel
	table   tableModel
	mpanel  marginsModel
	form    formModel
	note    textinput.Model
	frame   string
	pending bool // a settings change is being applied
}

// New builds the screen.
func New(o Options) Model {
	if o.PMTargetDeg == 0 {
		o.PMTargetDeg = DefaultPMTargetDeg
	}
	if o.GMTargetDB == 0 {
		o.GMTargetDB = DefaultGMTargetDB
	}
	if o.Tick <= 0 {
		o.Tick = 100 * time.Millisecond
	}
	st := newStyles(o.Renderer)
	m := Model{
		opt:    o,
		st:     &st,
		keys:   DefaultKeyMap(),
		dkeys:  defaultDialogKeys(),
		help:   help.New(),
		sess:   o.Session,
		state:  o.State,
		active: -1,
		lost:   lostInfo{at: -1},
		follow: true,
		w:      80,
		h:      24,
		dirty:  true,
	}
	if o.Controller == nil && o.State == sweep.Idle {
		m.state = sweep.Done
	}
	m.sess.Points = append([]sweep.Point(nil), o.Session.Points...)
	m.plot = newPlot(m.st)
	m.table = newTable(m.st)
	m.status = newStatus(m.st)
	m.mpanel = newMargins(m.st, o.PMTargetDeg, o.GMTargetDB)
	m.note = textinput.New()
	m.note.Placeholder = "what changed on the bench"
	m.note.CharLimit = 500
	m.note.Prompt = "note: "
	if o.ShowSafety {
		m.mode = modeSafety
	}
	if o.Controller == nil {
		m.started = o.Session.Created
		m.now = o.Session.Updated
	}
	m.updateKeys()
	m.render()
	return m
}

// Init starts listening and the redraw tick. While the first-run safety
// note is up, a live sweep is held paused (output off): nothing is
// injected before the note has been read.
func (m Model) Init() tea.Cmd {
	cmds := []tea.Cmd{listen(m.opt.SweepID, m.opt.Events), m.tick()}
	if c := m.opt.Controller; c != nil && m.mode == modeSafety {
		cmds = append(cmds, call("held paused until the safety note is read", func() error { c.Pause(); return nil }))
	}
	return tea.Batch(cmds...)
}

// resumeAfterSafety resumes the sweep Init held.
func (m Model) resumeAfterSafety(remember bool) tea.Cmd {
	c, dir := m.opt.Controller, m.opt.ConfigDir
	return func() tea.Msg {
		var err error
		if remember {
			err = dismissSafety(dir)
		}
		if c != nil {
			c.Resume()
		}
		if remember && err == nil {
			return doneMsg{what: "safety note will not be shown again"}
		}
		return doneMsg{what: "safety note", err: err}
	}
}

// live reports whether a sweep is in progress (running, paused or
// refining) and so quitting needs a confirmation.
func (m Model) live() bool {
	if m.opt.Controller == nil || m.closed {
		return false
	}
	switch m.state {
	case sweep.Idle, sweep.Running, sweep.Paused, sweep.Refining, sweep.Reconnecting:
		return true
	}
	return false
}

// updateKeys enables the bindings that apply now, so help tells the truth.
func (m *Model) updateKeys() {
	ctl := m.opt.Controller != nil && !m.closed
	// Pausing while reconnecting stops the tries; Resume starts them again.
	running := m.state == sweep.Running || m.state == sweep.Refining || m.state == sweep.Idle || m.state == sweep.Reconnecting
	m.keys.Pause.SetEnabled(ctl && (running || m.state == sweep.Paused))
	if m.state == sweep.Paused {
		m.keys.Pause.SetHelp("space", "resume")
	} else {
		m.keys.Pause.SetHelp("space", "pause")
	}
	m.keys.Remeasure.SetEnabled(ctl && len(m.sess.Points) > 0)
	m.keys.Flagged.SetEnabled(ctl)
	m.keys.Edit.SetEnabled(ctl)
	m.keys.Note.SetEnabled(ctl)
	m.keys.Save.SetEnabled(ctl)
	n := len(m.sess.Points)
	m.keys.Left.SetEnabled(n > 0)
	m.keys.Right.SetEnabled(n > 0)
	m.keys.First.SetEnabled(n > 0)
	m.keys.Last.SetEnabled(n > 0)
}

// maxPoints bounds the index an event may create, so a corrupt event
// cannot make the screen allocate without limit (plans stop at 10 000).
const maxPoints = 100000

// ensure makes point i exist, at frequency f when it is new.
func (m *Model) ensure(i int, f float64) bool {
	if i < 0 || i > maxPoints {
		return false
	}
	for len(m.sess.Points) <= i {
		m.sess.Points = append(m.sess.Points, sweep.Point{Chosen: -1})
	}
	if m.sess.Points[i].FreqHz == 0 {
		m.sess.Points[i].FreqHz = f
	}
	return true
}

// apply stores one engine event.
func (m *Model) apply(ev sweep.Event) {
	switch e := ev.(type) {
	case sweep.PointStarted:
		if m.ensure(e.Index, e.FreqHz) {
			m.active = e.Index
			if m.follow {
				m.cursor = e.Index
			}
		}
	case sweep.PointMeasured:
		if m.ensure(e.Index, e.Point.FreqHz) {
			m.sess.Points[e.Index] = e.Point
		}
	case sweep.PointFlagged:
		if m.ensure(e.Index, 0) {
			m.sess.Points[e.Index].Flagged = true
			m.sess.Points[e.Index].Flag = e.Reason
		}
	case sweep.PointAdded:
		if e.Index < 0 || e.Index > len(m.sess.Points) {
			m.ensure(e.Index, e.FreqHz)
			break
		}
		p := sweep.Point{FreqHz: e.FreqHz, Chosen: -1}
		m.sess.Points = append(m.sess.Points, sweep.Point{})
		copy(m.sess.Points[e.Index+1:], m.sess.Points[e.Index:])
		m.sess.Points[e.Index] = p
		if m.cursor >= e.Index && !m.follow {
			m.cursor++
		}
		if m.active >= e.Index {
			m.active++
		}
	case sweep.MarginsUpdated:
		// Margins are recomputed from the points with the session's own
		// function, so the screen and the file agree; nothing to store.
	case sweep.StateChanged:
		m.state, m.stateMsg = e.State, e.Msg
		if e.State != sweep.Running && e.State != sweep.Refining {
			m.active = -1
		}
		if e.State == sweep.Failed && e.Msg != "" {
			m.setFlash("error: "+e.Msg, true)
		}
		if e.State == sweep.Reconnecting {
			// The fault takes the second status line.
			m.setFlash("", false)
			if m.lost.fault == "" {
				m.lost.fault = e.Msg
			}
		}
	case sweep.InstrumentLost:
		m.lost = lostInfo{at: e.Index, window: e.Window}
		if e.Err != nil {
			m.lost.fault = e.Err.Error()
		}
	case sweep.WaitingForInstruments:
		m.lost.offSent, m.lost.offOK = true, e.OffErr == nil
		if e.Window > 0 {
			m.lost.window = e.Window
		}
	case sweep.ReconnectFailed:
		m.lost.tries, m.lost.next = e.Try, e.Retry
		if e.Err != nil {
			m.lost.lastErr = e.Err.Error()
		}
	case sweep.Reconnected:
		m.lost = lostInfo{at: -1}
		tries := "tries"
		if e.Tries == 1 {
			tries = "try"
		}
		m.setFlash(fmt.Sprintf("reconnected after %v (%d %s): settings applied again, resuming at point %d (%s Hz)",
			shortDuration(e.After), e.Tries, tries, e.Index+1, formatHz(e.FreqHz)), false)
	case sweep.ErrorEvent:
		if e.Err != nil {
			m.setFlash("error: "+e.Err.Error(), true)
		}
	}
}

func (m *Model) setFlash(s string, bad bool) { m.flash, m.flashBad = s, bad }

// Update handles one message.
func (m Model) Update(msg tea.Msg) (tea.Model, tea.Cmd) {
	var cmd tea.Cmd
	redraw := false
	switch msg := msg.(type) {
	case tea.WindowSizeMsg:
		m.w, m.h = msg.Width, msg.Height
		redraw = true
	case tickMsg:
		t := time.Time(msg)
		if m.opt.Controller != nil {
			if m.started.IsZero() {
				m.started = t
			}
			if m.live() {
				m.now = t
				redraw = true // the clock moved
			}
		}
		if m.dirty {
			redraw = true
		}
		cmd = m.tick()
	case eventsMsg:
		if msg.id != m.opt.SweepID {
			return m, nil // a replaced sweep's listener: let it end
		}
		for _, ev := range msg.evs {
			m.apply(ev)
		}
		m.dirty = true
		m.updateKeys()
		cmd = listen(m.opt.SweepID, m.opt.Events)
	case eventsClosedMsg:
		if msg.id == m.opt.SweepID {
			m.closed = true
			m.active = -1
			m.dirty = true
			m.updateKeys()
		}
	case doneMsg:
		if msg.err != nil {
			m.setFlash(msg.what+": "+msg.err.Error(), true)
		} else {
			m.setFlash(msg.what, false)
		}
		redraw = true
	case settingsMsg:
		m.pending = false
		if msg.err != nil {
			m.form.SetError(msg.err)
		} else {
			m.mode = modeBench
			m.setFlash("settings updated", false)
			cmd = m.snapshot()
		}
		redraw = true
	case snapshotMsg:
		m.sess = msg.s
		m.dirty = true
		m.updateKeys()
		redraw = true
	case stoppedMsg:
		return m, tea.Quit
	case tea.KeyMsg:
		m, cmd = m.key(msg)
		redraw = true
	default:
		// Cursor blinks and the like for the text inputs.
		switch m.mode {
		case modeForm:
			m.form, cmd = m.form.Update(msg)
		case modeNote:
			m.note, cmd = m.note.Update(msg)
		}
		redraw = true
	}
	if redraw {
		m.render()
	}
	return m, cmd
}

// call runs a controller method off the Update goroutine.
func call(what string, f func() error) tea.Cmd {
	return func() tea.Msg { return doneMsg{what: what, err: f()} }
}

func (m Model) snapshot() tea.Cmd {
	c := m.opt.Controller
	if c == nil {
		return nil
	}
	return func() tea.Msg { return snapshotMsg{c.Snapshot()} }
}

// stop turns the output off and then quits.
func (m Model) stop() (Model, tea.Cmd) {
	m.mode = modeQuitting
	c := m.opt.Controller
	return m, func() tea.Msg {
		if c != nil {
			c.Stop()
		}
		return stoppedMsg{}
	}
}

func (m Model) key(k tea.KeyMsg) (Model, tea.Cmd) {
	if key.Matches(k, m.keys.ForceQuit) {
		return m.stop()
	}
	m.flash = ""
	switch m.mode {
	case modeSafety:
		switch {
		case key.Matches(k, m.dkeys.Forever):
			m.mode = modeBench
			return m, m.resumeAfterSafety(true)
		case key.Matches(k, m.dkeys.Submit), key.Matches(k, m.dkeys.Cancel):
			m.mode = modeBench
			return m, m.resumeAfterSafety(false)
		}
		return m, nil
	case modeConfirmQuit:
		switch {
		case key.Matches(k, m.dkeys.Yes):
			return m.stop()
		case key.Matches(k, m.dkeys.No):
			m.mode = modeBench
		}
		return m, nil
	case modeQuitting:
		return m, nil
	case modeNote:
		switch {
		case key.Matches(k, m.dkeys.Cancel):
			m.mode = modeBench
			return m, nil
		case key.Matches(k, m.dkeys.Submit):
			m.mode = modeBench
			text := strings.TrimSpace(m.note.Value())
			if text == "" || m.opt.Controller == nil {
				return m, nil
			}
			m.sess.Notes = append(m.sess.Notes, sweep.Note{At: m.now, Text: text})
			c := m.opt.Controller
			return m, call("note added", func() error { c.AddNote(text); return nil })
		}
		var cmd tea.Cmd
		m.note, cmd = m.note.Update(k)
		return m, cmd
	case modeForm:
		switch {
		case key.Matches(k, m.dkeys.Cancel):
			m.mode = modeBench
			return m, nil
		case key.Matches(k, m.dkeys.Submit):
			if m.pending {
				return m, nil
			}
			s, err := m.form.Settings()
			m.form.SetError(err)
			if err != nil || m.opt.Controller == nil {
				return m, nil
			}
			m.pending = true
			c := m.opt.Controller
			return m, func() tea.Msg { return settingsMsg{c.UpdateSettings(s)} }
		}
		var cmd tea.Cmd
		m.form, cmd = m.form.Update(k)
		return m, cmd
	}

	c := m.opt.Controller
	n := len(m.sess.Points)
	switch {
	case key.Matches(k, m.keys.Quit):
		if m.live() {
			m.mode = modeConfirmQuit
			return m, nil
		}
		return m.stop()
	case key.Matches(k, m.keys.Help):
		m.help.ShowAll = !m.help.ShowAll
	case key.Matches(k, m.keys.Left):
		m.follow = false
		m.cursor = max(m.cursor-1, 0)
	case key.Matches(k, m.keys.Right):
		m.follow = false
		m.cursor = min(m.cursor+1, n-1)
	case key.Matches(k, m.keys.First):
		m.follow = false
		m.cursor = 0
	case key.Matches(k, m.keys.Last):
		m.follow = true
		m.cursor = n - 1
		if m.active >= 0 {
			m.cursor = m.active
		}
	case key.Matches(k, m.keys.Pause):
		if m.state == sweep.Paused {
			m.setFlash("resuming…", false)
			return m, call("resumed", func() error { c.Resume(); return nil })
		}
		m.setFlash("pausing…", false)
		return m, call("paused: output off", func() error { c.Pause(); return nil })
	case key.Matches(k, m.keys.Remeasure):
		i := m.cursor
		f := m.sess.Points[i].FreqHz
		return m, call(fmt.Sprintf("point %d (%s Hz) queued", i+1, formatHz(f)), func() error {
			return c.Remeasure(i, nil)
		})
	case key.Matches(k, m.keys.Flagged):
		return m, func() tea.Msg {
			n, err := c.RemeasureFlagged(nil)
			return doneMsg{what: fmt.Sprintf("%d flagged points queued", n), err: err}
		}
	case key.Matches(k, m.keys.Edit):
		m.form = newForm(m.st, m.dkeys, m.sess.Settings)
		m.mode = modeForm
		return m, textinput.Blink
	case key.Matches(k, m.keys.Note):
		m.note.Reset()
		m.note.Focus()
		m.mode = modeNote
		return m, textinput.Blink
	case key.Matches(k, m.keys.Save):
		file := m.opt.SessionFile
		return m, call("saved "+file, c.Save)
	}
	return m, nil
}

// legend explains the plot's glyphs under the full help.
var legend = fmt.Sprintf("plot: ⠒ curve (good points) · %c retried · %c flagged · %c selected · %c measuring · %c crossover · ┊ ±σ where large",
	glyphRetried, glyphFlagged, glyphCursor, glyphActive, glyphCrossover)

// wrapList breaks a list joined by sep into lines of at most w cells,
// breaking only at separators.
func wrapList(s, sep string, w int) []string {
	var out []string
	cur := ""
	for _, item := range strings.Split(s, sep) {
		switch {
		case cur == "":
			cur = item
		case len([]rune(cur+sep+item)) <= w:
			cur += sep + item
		default:
			out = append(out, cur)
			cur = item
		}
	}
	return append(out, cur)
}

// View returns the frame drawn at the last tick or key.
func (m Model) View() string { return m.frame }

// noAnswer says whether an instrument fault is being handled: from the
// engine's InstrumentLost (it then turns the output off, saves and
// reconnects) until Reconnected, unless the sweep paused or ended.
func (m Model) noAnswer() bool {
	switch m.state {
	case sweep.Reconnecting:
		return true
	case sweep.Running, sweep.Refining:
		return m.lost.at >= 0
	}
	return false
}

// stateText names the state for the status line.
func (m Model) stateText() string {
	if m.noAnswer() {
		return "NO ANSWER"
	}
	switch m.state {
	case sweep.Idle:
		return "STARTING"
	case sweep.Running:
		return "RUNNING"
	case sweep.Paused:
		return "PAUSED"
	case sweep.Refining:
		return "REFINING"
	case sweep.Done:
		if m.opt.Controller == nil {
			return "BROWSING"
		}
		return "DONE"
	case sweep.Failed:
		return "ERROR"
	case sweep.Stopped:
		return "STOPPED"
	}
	return fmt.Sprintf("state %d", int(m.state))
}

// refresh recomputes what the panels show from the session.
func (m *Model) refresh() {
	m.views = viewPoints(&m.sess)
	m.margins, m.mErr = m.sess.Margins()
	if len(m.sess.Points) == 0 {
		m.cursor = 0
	} else {
		m.cursor = min(max(m.cursor, 0), len(m.sess.Points)-1)
	}
	m.dirty = false
}

// span is the frequency axis: the plan's ends widened to hold every point.
func (m Model) span() (lo, hi float64) {
	s := m.sess.Settings
	lo, hi = s.StartHz, s.StopHz
	if len(s.Frequencies) > 0 || !(lo > 0) || !(hi > lo) {
		lo, hi = 0, 0
		for _, f := range s.Frequencies {
			if f > 0 && (lo == 0 || f < lo) {
				lo = f
			}
			hi = max(hi, f)
		}
	}
	for _, p := range m.sess.Points {
		if p.FreqHz > 0 && (lo == 0 || p.FreqHz < lo) {
			lo = p.FreqHz
		}
		hi = max(hi, p.FreqHz)
	}
	if lo > 0 && hi <= lo {
		lo, hi = lo/3, hi*3
	}
	return lo, hi
}

// render draws the frame into m.frame, first recomputing the points and
// margins if the session changed.
func (m *Model) render() {
	if m.dirty {
		m.refresh()
	}
	m.draw()
}

// draw lays out and draws every panel from the computed state.
func (m *Model) draw() {
	w, h := max(m.w, 1), max(m.h, 1)
	m.help.Width = w
	helpView := m.help.View(m.keys)
	if m.help.ShowAll {
		for _, l := range wrapList(legend, " · ", w) {
			helpView += "\n" + m.st.dim.Render(l)
		}
	}
	switch m.mode {
	case modeSafety:
		helpView = m.st.dim.Render("enter: continue · d: continue, don't show again · ctrl+c: stop and quit")
	case modeConfirmQuit:
		helpView = m.st.dim.Render("y/enter: stop and quit · n/esc: keep going")
	case modeForm:
		helpView = m.st.dim.Render("editing settings")
	case modeNote:
		helpView = m.st.dim.Render("enter: add note · esc: cancel")
	}
	helpLines := strings.Split(helpView, "\n")
	m.status.SetSize(w)
	m.status.Set(m.statusInfo())
	status := strings.Split(m.status.View(), "\n")
	bodyH := max(h-len(status)-len(helpLines), 1)

	var body string
	switch m.mode {
	case modeSafety:
		body = block(safetyText, w, bodyH)
	case modeForm:
		body = block(strings.Split(m.form.View(), "\n"), w, bodyH)
	case modeConfirmQuit:
		body = m.benchBody(w, bodyH-2) + "\n" + fitLine("", w) + "\n" +
			fitLine(m.st.bad.Render("A sweep is running. Stop it, turn the output off and quit? (y/n)"), w)
	case modeQuitting:
		body = m.benchBody(w, bodyH-1) + "\n" + fitLine(m.st.warn.Render("stopping: turning the generator output off…"), w)
	case modeNote:
		body = m.benchBody(w, bodyH-1) + "\n" + fitLine(m.note.View(), w)
	default:
		body = m.benchBody(w, bodyH)
	}
	lines := append(status, strings.Split(body, "\n")...)
	lines = append(lines, helpLines...)
	if len(lines) > h {
		lines = lines[:h]
	}
	for i := range lines {
		lines[i] = fitLine(lines[i], w)
	}
	m.frame = strings.Join(lines, "\n")
}

// benchBody lays out the plot, margins, details and table in w×h.
func (m *Model) benchBody(w, h int) string {
	if h <= 0 {
		return ""
	}
	lo, hi := m.span()
	m.plot.SetData(m.views, lo, hi)
	m.plot.SetCursor(m.cursor, m.active)
	m.plot.SetMargins(m.margins, m.mErr == nil)
	m.table.SetData(m.views)
	m.table.SetCursor(m.cursor, m.active)
	m.mpanel.SetMargins(m.margins, m.mErr, m.sess.Settings.Measure == sweep.MeasureRatio)
	mLines := m.mpanel.lines()
	details := detailLines(&m.sess, m.cursor)

	if w >= 120 && h >= 20 {
		side := 46
		m.plot.SetSize(w-side-1, h)
		mh := len(mLines)
		dh := min(len(details), 6)
		th := max(h-mh-dh-2, 2)
		m.table.SetSize(side, th)
		right := strings.Join([]string{
			block(mLines, side, mh),
			fitLine("", side),
			block(details, side, dh),
			fitLine("", side),
			m.table.View(),
		}, "\n")
		return hjoin(" ", m.plot.View(), block(strings.Split(right, "\n"), side, h))
	}
	ph := max(h*11/20, min(h, 7))
	bh := h - ph
	m.plot.SetSize(w, ph)
	if bh <= 0 {
		return m.plot.View()
	}
	lw := min(40, w/2)
	rw := w - lw - 1
	m.table.SetSize(rw, bh)
	mh := min(len(mLines), bh)
	left := block(mLines, lw, mh)
	if bh > mh {
		left += "\n" + block(details, lw, bh-mh)
	}
	return m.plot.View() + "\n" + hjoin(" ", left, m.table.View())
}

// statusInfo gathers what the status panel shows.
func (m Model) statusInfo() statusInfo {
	n := max(len(m.sess.Points), len(m.sess.Settings.Plan()))
	done := 0
	for _, v := range m.views {
		if v.Has {
			done++
		}
	}
	k := done
	if m.active >= 0 {
		k = m.active + 1
	}
	in := statusInfo{
		State: m.stateText(), Bad: m.state == sweep.Failed || m.noAnswer(),
		K: k, N: n,
		File: m.opt.SessionFile, ReadOnly: m.opt.Controller == nil,
		Flash: m.flash, FlashBad: m.flashBad,
		GenIDN: m.sess.Instruments.GeneratorIDN, DigIDN: m.sess.Instruments.DigitizerIDN,
	}
	switch {
	case m.state == sweep.Failed || m.state == sweep.Stopped:
		in.StateMsg = m.stateMsg
	case m.noAnswer():
		in.Waiting, in.StateMsg = m.lost.describe()
		if m.lost.at >= 0 {
			in.K = m.lost.at + 1
		}
	}
	if !m.started.IsZero() && !m.now.IsZero() {
		in.HaveTime = true
		in.Elapsed = m.now.Sub(m.started)
		if (m.state == sweep.Running || m.state == sweep.Refining) && done > 0 && n > done && in.Elapsed > 0 {
			in.HaveETA = true
			in.ETA = time.Duration(float64(in.Elapsed) / float64(done) * float64(n-done))
		}
	}
	return in
}

// lostInfo is what the screen knows of an instrument fault while the
// engine reconnects (sweep.InstrumentLost, sweep.ReconnectFailed).
type lostInfo struct {
	at      int    // the point it hit; −1: none
	fault   string // the error, naming the command that went unanswered
	window  time.Duration
	offSent bool // the engine has sent the output off
	offOK   bool // and the generator accepted it
	tries   int  // failed tries so far
	next    time.Duration
	lastErr string
}

// describe words the fault for the status lines: what the engine is
// doing (first line, short) and the fault itself, then the give-up
// window and the last try's error (second line, cut at the width).
func (l lostInfo) describe() (doing, msg string) {
	switch {
	case !l.offSent:
		doing = "turning the output off"
	case l.offOK:
		doing = "output off, reconnecting"
	default:
		// The off went out over a link that did not answer: it may not
		// have reached the generator.
		doing = "output off NOT confirmed, reconnecting"
	}
	if l.tries > 0 {
		doing += fmt.Sprintf(" (try %d failed, next in %v)", l.tries, shortDuration(l.next))
	}
	msg = l.fault
	if l.window > 0 {
		msg += fmt.Sprintf(" · gives up after %v", l.window)
	}
	if l.lastErr != "" {
		msg += " · last try: " + l.lastErr
	}
	return doing, msg
}
