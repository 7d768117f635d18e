package tui

import (
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	tea "github.com/charmbracelet/bubbletea"
	"github.com/charmbracelet/x/ansi"

	"loopsweep/sweep"
)

// newTest builds a live screen on the test session at w×h, without the
// safety note, and applies one tick so the frame is current.
func newTest(t *testing.T, ctl *fakeController, w, h int) Model {
	t.Helper()
	o := Options{
		Session:     testSession(31, 20),
		SessionFile: "/bench/run-1.json",
		Renderer:    plainRenderer(),
		State:       sweep.Running,
		Events:      make(chan sweep.Event),
	}
	if ctl != nil {
		o.Controller = ctl
	}
	m := New(o)
	m, _ = send(t, m, tea.WindowSizeMsg{Width: w, Height: h}, tickMsg(testT0.Add(30*time.Second)))
	return m
}

func plain(m Model) string { return ansi.Strip(m.View()) }

// checkShape checks that the frame is exactly h lines of exactly w cells.
func checkShape(t *testing.T, m Model, w, h int) {
	t.Helper()
	lines := strings.Split(m.View(), "\n")
	if len(lines) != h {
		t.Errorf("frame has %d lines, want %d", len(lines), h)
	}
	for i, l := range lines {
		if n := ansi.StringWidth(l); n != w {
			t.Errorf("line %d is %d cells wide, want %d: %q", i, n, w, ansi.Strip(l))
		}
	}
}

func TestResize(t *testing.T) {
	for _, sz := range []struct{ w, h int }{{80, 24}, {200, 50}, {120, 40}, {100, 30}, {40, 12}, {20, 6}} {
		ctl := &fakeController{}
		m := newTest(t, ctl, sz.w, sz.h)
		checkShape(t, m, sz.w, sz.h)
		// Down to 80×24 again after a large size: the frame must follow.
		m, _ = send(t, m, tea.WindowSizeMsg{Width: 80, Height: 24})
		checkShape(t, m, 80, 24)
	}
	// A degenerate size must not panic.
	m := newTest(t, &fakeController{}, 1, 1)
	m, _ = send(t, m, tea.WindowSizeMsg{Width: 0, Height: 0})
	_ = m.View()
}

func TestGolden(t *testing.T) {
	tests := []struct {
		name string
		w, h int
		keys []string
	}{
		{"bench_80x24", 80, 24, nil},
		{"bench_200x50", 200, 50, nil},
		{"bench_120x40_cursor", 120, 40, []string{"G", "left", "left", "left", "h", "h", "h", "h", "h", "h", "h", "h", "h", "h", "h"}},
		{"fullhelp_80x24", 80, 24, []string{"?"}},
		{"form_80x24", 80, 24, []string{"e"}},
		{"note_80x24", 80, 24, []string{"n", "p", "r", "o", "b", "e"}},
		{"confirm_80x24", 80, 24, []string{"q"}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			m := newTest(t, &fakeController{}, tt.w, tt.h)
			m, _ = send(t, m, keys(tt.keys...)...)
			checkShape(t, m, tt.w, tt.h)
			golden(t, tt.name, m.View())
		})
	}
	t.Run("safety_80x24", func(t *testing.T) {
		m := New(Options{Controller: &fakeController{}, Renderer: plainRenderer(), ShowSafety: true})
		m, _ = send(t, m, tea.WindowSizeMsg{Width: 80, Height: 24})
		checkShape(t, m, 80, 24)
		golden(t, "safety_80x24", m.View())
	})
	t.Run("browse_80x24", func(t *testing.T) {
		m := New(Options{Session: testSession(31, 31), Renderer: plainRenderer(), SessionFile: "old.json"})
		m, _ = send(t, m, tea.WindowSizeMsg{Width: 80, Height: 24})
		checkShape(t, m, 80, 24)
		golden(t, "browse_80x24", m.View())
	})
}

func TestKeysCallController(t *testing.T) {
	tests := []struct {
		name  string
		keys  []string
		state sweep.State
		want  []string
	}{
		{"space pauses a running sweep", []string{" "}, sweep.Running, []string{"Pause"}},
		{"space resumes a paused sweep", []string{" "}, sweep.Paused, []string{"Resume"}},
		{"r re-measures the selected point", []string{"left", "left", "r"}, sweep.Running, []string{"Remeasure 17"}},
		{"h and l move too", []string{"h", "h", "l", "r"}, sweep.Running, []string{"Remeasure 18"}},
		{"home then right", []string{"home", "right", "r"}, sweep.Running, []string{"Remeasure 1"}},
		{"g goes to the first point", []string{"g", "r"}, sweep.Running, []string{"Remeasure 0"}},
		{"R re-measures flagged", []string{"R"}, sweep.Running, []string{"RemeasureFlagged"}},
		{"s saves", []string{"s"}, sweep.Running, []string{"Save"}},
		{"n adds a note", []string{"n", "h", "i", "enter"}, sweep.Running, []string{"AddNote hi"}},
		{"esc drops the note", []string{"n", "h", "i", "esc"}, sweep.Running, nil},
		{"q asks, y stops", []string{"q", "y"}, sweep.Running, []string{"Stop"}},
		{"q asks, n keeps running", []string{"q", "n", "s"}, sweep.Running, []string{"Save"}},
		{"q when done stops at once", []string{"q"}, sweep.Done, []string{"Stop"}},
		{"ctrl+c stops", []string{"ctrl+c"}, sweep.Running, []string{"Stop"}},
		{"? only shows help", []string{"?"}, sweep.Running, nil},
		{"e then esc changes nothing", []string{"e", "esc"}, sweep.Running, nil},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			ctl := &fakeController{}
			m := newTest(t, ctl, 80, 24)
			// The cursor follows the sweep; put it at point 19 (index 19)
			// as if the engine were measuring it.
			m, _ = send(t, m, eventsMsg{evs: []sweep.Event{
				sweep.StateChanged{State: tt.state},
				sweep.PointStarted{Index: 19, FreqHz: m.sess.Points[19].FreqHz},
			}})
			m, cmds := send(t, m, keys(tt.keys...)...)
			msgs := run(cmds)
			got := ctl.Calls()
			if strings.Join(got, ",") != strings.Join(tt.want, ",") {
				t.Errorf("calls %q, want %q", got, tt.want)
			}
			quit := false
			for _, msg := range msgs {
				if _, ok := msg.(stoppedMsg); ok {
					_, cmd := m.Update(msg)
					quit = cmd != nil && cmd() == tea.Quit()
				}
			}
			wantQuit := len(tt.want) > 0 && tt.want[0] == "Stop"
			if quit != wantQuit {
				t.Errorf("quit = %v, want %v", quit, wantQuit)
			}
		})
	}
}

func TestQuitConfirmShowsPrompt(t *testing.T) {
	m := newTest(t, &fakeController{}, 80, 24)
	m, _ = send(t, m, keyMsg("q"))
	if !strings.Contains(plain(m), "Stop it, turn the output off and quit? (y/n)") {
		t.Errorf("no confirmation prompt:\n%s", plain(m))
	}
	m, _ = send(t, m, keyMsg("esc"))
	if strings.Contains(plain(m), "(y/n)") {
		t.Error("prompt still shown after esc")
	}
}

func TestBrowseDisablesCommands(t *testing.T) {
	m := New(Options{Session: testSession(31, 31), Renderer: plainRenderer()})
	m, _ = send(t, m, tea.WindowSizeMsg{Width: 80, Height: 24})
	for _, k := range []string{" ", "r", "R", "e", "n", "s"} {
		var cmds []tea.Cmd
		m, cmds = send(t, m, keyMsg(k))
		if len(run(cmds)) != 0 || m.mode != modeBench {
			t.Errorf("key %q did something in read-only browsing", k)
		}
	}
	if !strings.Contains(plain(m), "BROWSING") || !strings.Contains(plain(m), "read-only") {
		t.Errorf("status does not say browsing read-only:\n%s", plain(m))
	}
	// Help lists only what works: no pause, no re-measure.
	if h := plain(m); strings.Contains(h, "pause") || strings.Contains(h, "re-measure") {
		t.Errorf("help offers disabled keys:\n%s", h)
	}
	// q quits at once.
	_, cmds := send(t, m, keyMsg("q"))
	if msgs := run(cmds); len(msgs) != 1 {
		t.Errorf("q: got %v, want one stopped message", msgs)
	}
}

func TestEditSettings(t *testing.T) {
	ctl := &fakeController{snap: testSession(40, 20)}
	m := newTest(t, ctl, 80, 24)
	m, _ = send(t, m, keyMsg("e"))
	if m.mode != modeForm {
		t.Fatal("e did not open the form")
	}
	// Replace start (100) with 200, tab to stop and make it 50k.
	in := []string{"backspace", "backspace", "backspace", "2", "0", "0", "tab"}
	for range 6 { // "100000"
		in = append(in, "backspace")
	}
	in = append(in, "5", "0", "k", "tab", "tab", "backspace", "backspace", "backspace", "backspace", "0", ".", "0", "1", "enter")
	m, cmds := send(t, m, keys(in...)...)
	msgs := run(cmds)
	if got := ctl.Calls(); len(got) != 1 || got[0] != "UpdateSettings" {
		t.Fatalf("calls %q, want UpdateSettings; form error %q", got, m.form.err)
	}
	s := ctl.settings[0]
	// The values typed above.
	if s.StartHz != 200 || s.StopHz != 50e3 || s.AmpVpp != 0.01 || s.PerDecade != 10 {
		t.Errorf("settings start %g stop %g amp %g per decade %d, want 200, 50000, 0.01, 10", s.StartHz, s.StopHz, s.AmpVpp, s.PerDecade)
	}
	for _, msg := range msgs {
		var cmd tea.Cmd
		m, cmd = send1(m, msg)
		for _, mm := range run([]tea.Cmd{cmd}) {
			m, _ = send1(m, mm)
		}
	}
	if m.mode != modeBench || len(m.sess.Points) != 40 {
		t.Errorf("after apply: mode %d, %d points; want the bench and the engine's 40 points", m.mode, len(m.sess.Points))
	}
}

func send1(m Model, msg tea.Msg) (Model, tea.Cmd) {
	mm, cmd := m.Update(msg)
	return mm.(Model), cmd
}

func TestEditSettingsRejectsBadInput(t *testing.T) {
	tests := []struct {
		name  string
		field int
		value string
		want  string
	}{
		{"start not a number", fStart, "abc", "start"},
		{"stop below start", fStop, "50", "stop 50 Hz must be above start 100 Hz"},
		{"points per decade not whole", fPerDecade, "2.5", "points/decade"},
		{"amplitude above the cap", fAmp, "1", "above the cap"},
		{"cycles not a number", fCycles, "x", "cycles/record"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			ctl := &fakeController{}
			m := newTest(t, ctl, 80, 24)
			m, _ = send(t, m, keyMsg("e"))
			m.form.fields[tt.field].in.SetValue(tt.value)
			m, cmds := send(t, m, keyMsg("enter"))
			run(cmds)
			if len(ctl.Calls()) != 0 {
				t.Errorf("bad settings sent to the engine: %q", ctl.Calls())
			}
			if m.mode != modeForm || !strings.Contains(plain(m), tt.want) {
				t.Errorf("form does not show %q:\n%s", tt.want, plain(m))
			}
		})
	}
	// An error from the engine is shown in the form too.
	ctl := &fakeController{err: errors.New("amp_vpp: too large for this bench")}
	m := newTest(t, ctl, 80, 24)
	m, cmds := send(t, m, keyMsg("e"), keyMsg("enter"))
	for _, msg := range run(cmds) {
		m, _ = send1(m, msg)
	}
	if m.mode != modeForm || !strings.Contains(plain(m), "too large for this bench") {
		t.Errorf("engine error not shown:\n%s", plain(m))
	}
}

func TestEventsAndCoalescing(t *testing.T) {
	m := newTest(t, &fakeController{}, 80, 24)
	before := m.View()
	p := m.sess.Points[20]
	p.Attempts = m.sess.Points[19].Attempts
	m, cmds := send(t, m, eventsMsg{evs: []sweep.Event{
		sweep.PointStarted{Index: 20, FreqHz: p.FreqHz},
		sweep.PointMeasured{Index: 20, Point: p},
	}})
	if len(cmds) != 1 {
		t.Errorf("events message returned %d commands, want the next listen", len(cmds))
	}
	if m.View() != before {
		t.Error("frame redrawn before the tick: events must be drawn at the next tick")
	}
	m, _ = send(t, m, tickMsg(testT0.Add(31*time.Second)))
	if m.View() == before {
		t.Error("frame not redrawn at the tick")
	}
	if !strings.Contains(plain(m), "point 21 of 31") {
		t.Errorf("status does not show point 21 of 31:\n%s", plain(m))
	}
	// A stale sweep's events are dropped.
	m2, cmds := send(t, m, eventsMsg{id: 7, evs: []sweep.Event{sweep.StateChanged{State: sweep.Failed, Msg: "old"}}})
	if len(cmds) != 0 || m2.state == sweep.Failed {
		t.Error("event from another sweep ID was applied")
	}
	// Pause, error, done.
	m, _ = send(t, m, eventsMsg{evs: []sweep.Event{sweep.StateChanged{State: sweep.Paused, Msg: "by user"}}}, tickMsg(testT0.Add(32*time.Second)))
	if !strings.Contains(plain(m), "PAUSED") || !strings.Contains(plain(m), "space resume") {
		t.Errorf("paused state not shown:\n%s", plain(m))
	}
	m, _ = send(t, m, eventsMsg{evs: []sweep.Event{sweep.ErrorEvent{Err: errors.New("digitizer timeout")}}}, tickMsg(testT0.Add(33*time.Second)))
	if !strings.Contains(plain(m), "error: digitizer timeout") {
		t.Errorf("error not shown:\n%s", plain(m))
	}
	m, _ = send(t, m, eventsMsg{evs: []sweep.Event{sweep.StateChanged{State: sweep.Done}}}, eventsClosedMsg{}, tickMsg(testT0.Add(34*time.Second)))
	if !strings.Contains(plain(m), "DONE") {
		t.Errorf("done state not shown:\n%s", plain(m))
	}
}

func TestPointAddedAndFollow(t *testing.T) {
	m := newTest(t, &fakeController{}, 80, 24)
	m, _ = send(t, m, eventsMsg{evs: []sweep.Event{sweep.PointStarted{Index: 10, FreqHz: m.sess.Points[10].FreqHz}}})
	if m.cursor != 10 || m.active != 10 {
		t.Fatalf("cursor %d active %d, want both 10 (following)", m.cursor, m.active)
	}
	m, _ = send(t, m, keyMsg("left"))
	f := (m.sess.Points[4].FreqHz + m.sess.Points[5].FreqHz) / 2
	m, _ = send(t, m, eventsMsg{evs: []sweep.Event{sweep.PointAdded{Index: 5, FreqHz: f}, sweep.PointStarted{Index: 5, FreqHz: f}}})
	if len(m.sess.Points) != 32 || m.sess.Points[5].FreqHz != f {
		t.Fatalf("point not inserted: %d points", len(m.sess.Points))
	}
	if m.cursor != 10 || m.active != 5 {
		t.Errorf("cursor %d active %d, want 10 (the same point, shifted) and 5", m.cursor, m.active)
	}
	m, _ = send(t, m, keyMsg("end"))
	if m.cursor != 5 {
		t.Errorf("end: cursor %d, want the active point 5", m.cursor)
	}
}

func TestElapsedAndETA(t *testing.T) {
	m := New(Options{Controller: &fakeController{}, Session: testSession(31, 0), Renderer: plainRenderer(), State: sweep.Running})
	m, _ = send(t, m, tea.WindowSizeMsg{Width: 120, Height: 30}, tickMsg(testT0))
	full := testSession(31, 10)
	var evs []sweep.Event
	for i := 0; i < 10; i++ {
		evs = append(evs, sweep.PointMeasured{Index: i, Point: full.Points[i]})
	}
	// 10 of 31 points in 40 s: 4 s a point, 21 left, ETA 84 s = 1:24.
	m, _ = send(t, m, eventsMsg{evs: evs}, tickMsg(testT0.Add(40*time.Second)))
	if s := plain(m); !strings.Contains(s, "elapsed 0:40") || !strings.Contains(s, "ETA 1:24") || !strings.Contains(s, "point 10 of 31") {
		t.Errorf("status line wrong:\n%s", strings.SplitN(s, "\n", 2)[0])
	}
}

func TestSafetyNote(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "cfg")
	if SafetyDismissed(dir) {
		t.Fatal("dismissed before anything was written")
	}
	ctl := &fakeController{}
	m := New(Options{Controller: ctl, Renderer: plainRenderer(), ShowSafety: true, ConfigDir: dir})
	// The sweep is held paused while the note is up.
	run([]tea.Cmd{m.Init()})
	if got := ctl.Calls(); len(got) != 1 || got[0] != "Pause" {
		t.Errorf("Init with the note up: calls %q, want Pause", got)
	}
	m, _ = send(t, m, tea.WindowSizeMsg{Width: 80, Height: 24})
	for _, want := range []string{"Hazardous voltages", "isolating injection transformer", "protective earth", "small amplitude", "local electrical codes"} {
		if !strings.Contains(plain(m), want) {
			t.Errorf("safety note lacks %q", want)
		}
	}
	// enter continues without remembering.
	m1, cmds := send(t, m, keyMsg("enter"))
	run(cmds)
	if m1.mode != modeBench || SafetyDismissed(dir) {
		t.Errorf("enter: mode %d, remembered %v; want the bench, not remembered", m1.mode, SafetyDismissed(dir))
	}
	if got := ctl.Calls(); len(got) != 2 || got[1] != "Resume" {
		t.Errorf("after enter: calls %q, want Pause, Resume", got)
	}
	// d continues and remembers.
	m2, cmds := send(t, m, keyMsg("d"))
	for _, msg := range run(cmds) {
		if d, ok := msg.(doneMsg); ok && d.err != nil {
			t.Fatal(d.err)
		}
	}
	if m2.mode != modeBench || !SafetyDismissed(dir) {
		t.Errorf("d: mode %d, remembered %v; want the bench, remembered", m2.mode, SafetyDismissed(dir))
	}
	// An unwritable directory reports an error instead of panicking.
	file := filepath.Join(t.TempDir(), "file")
	if err := os.WriteFile(file, nil, 0o644); err != nil {
		t.Fatal(err)
	}
	if err := dismissSafety(filepath.Join(file, "sub")); err == nil {
		t.Error("dismissal under a regular file: no error")
	}
}

func TestListenBatchesAndCloses(t *testing.T) {
	ch := make(chan sweep.Event, 10)
	for i := 0; i < 5; i++ {
		ch <- sweep.PointStarted{Index: i}
	}
	close(ch)
	msg := listen(3, ch)()
	em, ok := msg.(eventsMsg)
	if !ok || em.id != 3 || len(em.evs) != 5 {
		t.Fatalf("got %#v, want one batch of 5 events stamped 3", msg)
	}
	if msg := listen(3, ch)(); msg != (eventsClosedMsg{3}) {
		t.Errorf("after close: got %#v", msg)
	}
	if listen(3, nil) != nil {
		t.Error("nil channel: want no command")
	}
}
