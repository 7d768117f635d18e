package tui

import (
	"errors"
	"strings"
	"testing"
	"time"

	tea "github.com/charmbracelet/bubbletea"

	"loopsweep/sweep"
)

// The engine's events when an instrument stops answering at point 21
// (index 20) and answers again on the second try, worded as the engine
// and the instrument drivers word them (sweep/reconnect.go,
// instr/session.go).
var (
	faultErr = errors.New(`capture 2000 points at 1258.93 Hz: query "*OPC?" on 127.0.0.1:5025: timeout: nothing for 300ms`)
	tryErr   = errors.New(`identify generator: query "*IDN?" on 127.0.0.1:5025: timeout: nothing for 300ms`)
)

func lostEvents(f float64) []sweep.Event {
	return []sweep.Event{
		sweep.PointStarted{Index: 20, FreqHz: f, Attempt: 1},
		sweep.InstrumentLost{Index: 20, FreqHz: f, Err: faultErr, Window: 2 * time.Minute},
		sweep.WaitingForInstruments{Window: 2 * time.Minute},
		sweep.StateChanged{State: sweep.Reconnecting, Msg: faultErr.Error() + "; reconnecting for up to 2m0s"},
		sweep.ReconnectFailed{Try: 1, Err: tryErr, Retry: 250 * time.Millisecond},
	}
}

// statusLines returns the two status lines of the frame.
func statusLines(m Model) (string, string) {
	lines := strings.Split(plain(m), "\n")
	return lines[0], lines[1]
}

// TestReconnectingStatus: while the engine reconnects, the status line
// says the instruments do not answer, which command went unanswered,
// that the output is off, and the last try's outcome; no ETA is
// promised. After the reconnection it says so and where the sweep
// resumes, then shows the sweep running again.
func TestReconnectingStatus(t *testing.T) {
	m := newTest(t, &fakeController{}, 200, 50)
	f := m.sess.Points[20].FreqHz
	m, _ = send(t, m, eventsMsg{evs: lostEvents(f)}, tickMsg(testT0.Add(31*time.Second)))
	l1, l2 := statusLines(m)
	for _, w := range []string{"NO ANSWER", "output off, reconnecting (try 1 failed, next in 250ms)", "point 21 of 31"} {
		if !strings.Contains(l1, w) {
			t.Errorf("state line lacks %q:\n%s", w, l1)
		}
	}
	if strings.Contains(l1, "ETA") {
		t.Errorf("state line promises an ETA while waiting:\n%s", l1)
	}
	for _, w := range []string{`NO ANSWER: capture 2000 points at 1258.93 Hz: query "*OPC?"`, "timeout", "gives up after 2m0s",
		`last try: identify generator: query "*IDN?"`} {
		if !strings.Contains(l2, w) {
			t.Errorf("message line lacks %q:\n%s", w, l2)
		}
	}
	if !strings.Contains(plain(m), "space pause") {
		t.Errorf("pause not offered while reconnecting:\n%s", plain(m))
	}

	m, _ = send(t, m, eventsMsg{evs: []sweep.Event{
		sweep.ReconnectFailed{Try: 2, Err: errors.New("connect 127.0.0.1:5025: connection refused"), Retry: 500 * time.Millisecond},
	}}, tickMsg(testT0.Add(32*time.Second)))
	l1, l2 = statusLines(m)
	if !strings.Contains(l1, "(try 2 failed, next in 500ms)") || !strings.Contains(l2, "last try: connect 127.0.0.1:5025: connection refused") || strings.Contains(l2, "*IDN?") {
		t.Errorf("status does not follow the tries:\n%s\n%s", l1, l2)
	}

	m, _ = send(t, m, eventsMsg{evs: []sweep.Event{
		sweep.Reconnected{Tries: 3, After: 1830 * time.Millisecond, Index: 20, FreqHz: f},
	}}, tickMsg(testT0.Add(33*time.Second)))
	if _, l2 := statusLines(m); !strings.Contains(l2, "reconnected after 1.8s (3 tries)") || !strings.Contains(l2, "resuming at point 21 ("+formatHz(f)+" Hz)") {
		t.Errorf("reconnection not reported:\n%s", l2)
	}
	m, _ = send(t, m, eventsMsg{evs: []sweep.Event{
		sweep.StateChanged{State: sweep.Running},
		sweep.PointStarted{Index: 20, FreqHz: f, Attempt: 1},
	}}, tickMsg(testT0.Add(34*time.Second)))
	if l1, _ := statusLines(m); !strings.Contains(l1, "RUNNING") || !strings.Contains(l1, "point 21 of 31") {
		t.Errorf("state line after the reconnection %q", l1)
	}
}

// TestNoAnswerBeforeWaiting: from the fault until the engine has sent
// the output off, the screen already says the instrument does not
// answer and that the output is being turned off; when the off was sent
// over a link that did not answer, it says the off is not confirmed.
func TestNoAnswerBeforeWaiting(t *testing.T) {
	m := newTest(t, &fakeController{}, 200, 50)
	f := m.sess.Points[20].FreqHz
	m, _ = send(t, m, eventsMsg{evs: []sweep.Event{
		sweep.StateChanged{State: sweep.Running},
		sweep.PointStarted{Index: 20, FreqHz: f, Attempt: 1},
		sweep.InstrumentLost{Index: 20, FreqHz: f, Err: faultErr, Window: 2 * time.Minute},
	}}, tickMsg(testT0.Add(31*time.Second)))
	l1, l2 := statusLines(m)
	if !strings.Contains(l1, "NO ANSWER · turning the output off · point 21 of 31") || !strings.Contains(l2, `query "*OPC?"`) {
		t.Errorf("status right after the fault:\n%s\n%s", l1, l2)
	}
	m, _ = send(t, m, eventsMsg{evs: []sweep.Event{
		sweep.WaitingForInstruments{OffErr: errors.New(`output off: query "SYST:ERR?" on 127.0.0.1:5025: timeout`), Window: 2 * time.Minute},
		sweep.StateChanged{State: sweep.Reconnecting, Msg: faultErr.Error() + "; reconnecting for up to 2m0s"},
	}}, tickMsg(testT0.Add(32*time.Second)))
	if l1, _ := statusLines(m); !strings.Contains(l1, "NO ANSWER · output off NOT confirmed, reconnecting") {
		t.Errorf("unconfirmed off not shown:\n%s", l1)
	}
}

// TestReconnectingGolden: the whole 80×24 frame while waiting.
func TestReconnectingGolden(t *testing.T) {
	m := newTest(t, &fakeController{}, 80, 24)
	m, _ = send(t, m, eventsMsg{evs: lostEvents(m.sess.Points[20].FreqHz)}, tickMsg(testT0.Add(31*time.Second)))
	checkShape(t, m, 80, 24)
	golden(t, "reconnecting_80x24", m.View())
}

// TestKeysWhileReconnecting: the keys still reach the engine while it
// waits for the instruments: space pauses (the tries stop), q asks
// before stopping (a sweep is still in progress), and both q-y and
// ctrl+c stop, which turns the output off, then quit.
func TestKeysWhileReconnecting(t *testing.T) {
	for _, tt := range []struct {
		name string
		keys []string
		want []string
	}{
		{"space pauses", []string{" "}, []string{"Pause"}},
		{"q asks, y stops", []string{"q", "y"}, []string{"Stop"}},
		{"q asks, n keeps waiting", []string{"q", "n"}, nil},
		{"ctrl+c stops", []string{"ctrl+c"}, []string{"Stop"}},
		{"s saves", []string{"s"}, []string{"Save"}},
	} {
		t.Run(tt.name, func(t *testing.T) {
			ctl := &fakeController{}
			m := newTest(t, ctl, 80, 24)
			m, _ = send(t, m, eventsMsg{evs: lostEvents(m.sess.Points[20].FreqHz)})
			if tt.keys[0] == "q" {
				m, _ = send(t, m, keyMsg("q"))
				if !strings.Contains(plain(m), "(y/n)") {
					t.Fatalf("q while reconnecting quit without asking:\n%s", plain(m))
				}
				tt.keys = tt.keys[1:]
			}
			m, cmds := send(t, m, keys(tt.keys...)...)
			msgs := run(cmds)
			if got := ctl.Calls(); strings.Join(got, ",") != strings.Join(tt.want, ",") {
				t.Errorf("calls %q, want %q", got, tt.want)
			}
			quit := false
			for _, msg := range msgs {
				if _, ok := msg.(stoppedMsg); ok {
					_, cmd := m.Update(msg)
					quit = cmd != nil && cmd() == tea.Quit()
				}
			}
			if want := len(tt.want) > 0 && tt.want[0] == "Stop"; quit != want {
				t.Errorf("quit = %v, want %v", quit, want)
			}
		})
	}
}

// TestReconnectGaveUpPauses: on the bench screen the engine pauses when
// the window passes (Config.PauseOnError); the error says so and space
// offers to resume, which tries again.
func TestReconnectGaveUpPauses(t *testing.T) {
	ctl := &fakeController{}
	m := newTest(t, ctl, 200, 50)
	m, _ = send(t, m, eventsMsg{evs: lostEvents(m.sess.Points[20].FreqHz)})
	gaveUp := errors.New("gave up reconnecting after 2m0s (24 tries, the last: " + tryErr.Error() + "): " + faultErr.Error())
	m, _ = send(t, m, eventsMsg{evs: []sweep.Event{
		sweep.ErrorEvent{Err: gaveUp},
		sweep.StateChanged{State: sweep.Paused, Msg: "paused"},
	}}, tickMsg(testT0.Add(40*time.Second)))
	l1, l2 := statusLines(m)
	if !strings.Contains(l1, "PAUSED") || !strings.Contains(l2, "error: gave up reconnecting after 2m0s") || !strings.Contains(l2, `"*OPC?"`) {
		t.Errorf("give-up not shown:\n%s\n%s", l1, l2)
	}
	if !strings.Contains(plain(m), "space resume") {
		t.Errorf("resume not offered:\n%s", plain(m))
	}
	_, cmds := send(t, m, keyMsg(" "))
	run(cmds)
	if got := ctl.Calls(); strings.Join(got, ",") != "Resume" {
		t.Errorf("calls %q, want Resume", got)
	}
}
