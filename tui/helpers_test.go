package tui

import (
	"flag"
	"math"
	"math/cmplx"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	tea "github.com/charmbracelet/bubbletea"
	"github.com/charmbracelet/lipgloss"
	"github.com/charmbracelet/x/ansi"
	"github.com/muesli/termenv"

	"loopsweep/sweep"
)

var update = flag.Bool("update", false, "rewrite the golden files in testdata/")

// fakeController records the calls the screen makes.
type fakeController struct {
	mu       sync.Mutex
	calls    []string
	settings []sweep.Settings
	snap     sweep.Session
	err      error // returned by the calls that return errors
}

func (f *fakeController) rec(s string) {
	f.mu.Lock()
	f.calls = append(f.calls, s)
	f.mu.Unlock()
}
func (f *fakeController) Pause()  { f.rec("Pause") }
func (f *fakeController) Resume() { f.rec("Resume") }
func (f *fakeController) Stop()   { f.rec("Stop") }
func (f *fakeController) Remeasure(i int, o *sweep.Settings) error {
	f.rec("Remeasure " + itoa(i))
	return f.err
}
func (f *fakeController) RemeasureFlagged(o *sweep.Settings) (int, error) {
	f.rec("RemeasureFlagged")
	return 2, f.err
}
func (f *fakeController) UpdateSettings(s sweep.Settings) error {
	f.rec("UpdateSettings")
	f.mu.Lock()
	f.settings = append(f.settings, s)
	f.mu.Unlock()
	return f.err
}
func (f *fakeController) AddNote(t string) { f.rec("AddNote " + t) }
func (f *fakeController) Save() error      { f.rec("Save"); return f.err }
func (f *fakeController) Snapshot() sweep.Session {
	f.rec("Snapshot")
	return f.snap
}
func (f *fakeController) Calls() []string {
	f.mu.Lock()
	defer f.mu.Unlock()
	return append([]string(nil), f.calls...)
}

func itoa(i int) string { return strings.TrimSpace(strings.Repeat(" ", 0) + fmtInt(i)) }
func fmtInt(i int) string {
	if i < 0 {
		return "-" + fmtInt(-i)
	}
	if i < 10 {
		return string(rune('0' + i))
	}
	return fmtInt(i/10) + string(rune('0'+i%10))
}

// plainRenderer has no colour: what a NO_COLOR terminal gets.
func plainRenderer() *lipgloss.Renderer {
	r := lipgloss.NewRenderer(os.Stdout)
	r.SetColorProfile(termenv.Ascii)
	return r
}

func colourRenderer() *lipgloss.Renderer {
	r := lipgloss.NewRenderer(os.Stdout)
	r.SetColorProfile(termenv.ANSI256)
	return r
}

// The test loop: an integrator with its crossover at fc = 1 kHz times
// two real poles at fp1 = 3 kHz and fp2 = 10 kHz,
//
//	L(jω) = (ωc/jω) · 1/(1 + jω/ωp1) · 1/(1 + jω/ωp2),
//
// evaluated in closed form here so the screen's numbers can be checked
// against an independent computation.
const (
	testFc  = 1000.0
	testFp1 = 3000.0
	testFp2 = 10000.0
)

func testLoop(f float64) complex128 {
	jw := complex(0, f)
	return complex(testFc, 0) / jw / (1 + jw/complex(testFp1, 0)) / (1 + jw/complex(testFp2, 0))
}

var testT0 = time.Date(2026, 1, 2, 3, 4, 5, 0, time.UTC)

// testSession has n points from 100 Hz to 100 kHz on the test loop, the
// first measured ones filled; point 3 was retried and point 5 flagged.
func testSession(n, measured int) sweep.Session {
	s := sweep.Session{
		Schema:  1,
		Created: testT0,
		Updated: testT0.Add(90 * time.Second),
		Settings: func() sweep.Settings {
			st := sweep.Defaults()
			st.StartHz, st.StopHz = 100, 100e3
			return st
		}(),
		Instruments: sweep.Instruments{GeneratorIDN: "Example Works,SG-1,0001,1.0", DigitizerIDN: "Example Works,DG-2,0002,1.0"},
	}
	for i := 0; i < n; i++ {
		f := 100 * math.Pow(1000, float64(i)/float64(n-1))
		p := sweep.Point{FreqHz: f, Chosen: -1}
		if i < measured {
			L := testLoop(f)
			a := sweep.Attempt{
				Started: testT0.Add(time.Duration(i) * time.Second), Finished: testT0.Add(time.Duration(i)*time.Second + 500*time.Millisecond),
				AmpVpp: 0.02, Re: real(L), Im: imag(L),
				GainDB: 20 * math.Log10(cmplx.Abs(L)), PhaseDeg: cmplx.Phase(L) * 180 / math.Pi,
				GainSigmaDB: 0.05, PhaseSigmaDeg: 0.3,
				Ch1: sweep.ChannelReading{AmpPeakV: 0.01, SNRdB: 60, H2dBc: -55, H3dBc: -62},
				Ch2: sweep.ChannelReading{AmpPeakV: 0.01 * cmplx.Abs(L), SNRdB: 50, H2dBc: -50, H3dBc: -58},
			}
			p.Attempts = []sweep.Attempt{a}
			if i == 3 {
				bad := a
				bad.GainSigmaDB, bad.PhaseSigmaDeg = 2, 15
				bad.Problem = "low SNR"
				p.Attempts = []sweep.Attempt{bad, a}
			}
			if i == 5 {
				a.GainSigmaDB, a.PhaseSigmaDeg = 3, 20
				p.Attempts = []sweep.Attempt{a, a, a}
				p.Flagged, p.Flag = true, "SNR below 20 dB after 3 attempts"
			}
		}
		s.Points = append(s.Points, p)
	}
	return s
}

// send delivers msgs in order and returns the model and the commands.
func send(t *testing.T, m Model, msgs ...tea.Msg) (Model, []tea.Cmd) {
	t.Helper()
	var cmds []tea.Cmd
	for _, msg := range msgs {
		mm, cmd := m.Update(msg)
		m = mm.(Model)
		if cmd != nil {
			cmds = append(cmds, cmd)
		}
	}
	return m, cmds
}

// run executes cmds (and batches inside them) with a deadline each and
// returns their messages; blink and tick commands that wait are dropped.
func run(cmds []tea.Cmd) []tea.Msg { return runWithin(cmds, 50*time.Millisecond) }

// runWithin is run with a given deadline per command.
func runWithin(cmds []tea.Cmd, d time.Duration) []tea.Msg {
	var out []tea.Msg
	for _, c := range cmds {
		if c == nil {
			continue
		}
		ch := make(chan tea.Msg, 1)
		go func() { ch <- c() }()
		select {
		case msg := <-ch:
			if b, ok := msg.(tea.BatchMsg); ok {
				out = append(out, runWithin(b, d)...)
				continue
			}
			out = append(out, msg)
		case <-time.After(d):
		}
	}
	return out
}

// keyMsg builds the key message a terminal sends for s.
func keyMsg(s string) tea.KeyMsg {
	switch s {
	case "left":
		return tea.KeyMsg{Type: tea.KeyLeft}
	case "right":
		return tea.KeyMsg{Type: tea.KeyRight}
	case "up":
		return tea.KeyMsg{Type: tea.KeyUp}
	case "down":
		return tea.KeyMsg{Type: tea.KeyDown}
	case "home":
		return tea.KeyMsg{Type: tea.KeyHome}
	case "end":
		return tea.KeyMsg{Type: tea.KeyEnd}
	case "enter":
		return tea.KeyMsg{Type: tea.KeyEnter}
	case "esc":
		return tea.KeyMsg{Type: tea.KeyEsc}
	case "tab":
		return tea.KeyMsg{Type: tea.KeyTab}
	case "backspace":
		return tea.KeyMsg{Type: tea.KeyBackspace}
	case "ctrl+c":
		return tea.KeyMsg{Type: tea.KeyCtrlC}
	case " ":
		return tea.KeyMsg{Type: tea.KeySpace, Runes: []rune{' '}}
	}
	return tea.KeyMsg{Type: tea.KeyRunes, Runes: []rune(s)}
}

func keys(ss ...string) []tea.Msg {
	out := make([]tea.Msg, len(ss))
	for i, s := range ss {
		out[i] = keyMsg(s)
	}
	return out
}

// golden compares got (ANSI stripped) with testdata/name.golden.
func golden(t *testing.T, name, got string) {
	t.Helper()
	got = ansi.Strip(got)
	p := filepath.Join("testdata", name+".golden")
	if *update {
		if err := os.WriteFile(p, []byte(got), 0o644); err != nil {
			t.Fatal(err)
		}
		return
	}
	want, err := os.ReadFile(p)
	if err != nil {
		t.Fatalf("read golden file (run go test -update): %v", err)
	}
	if got != string(want) {
		t.Errorf("view differs from %s (rerun with -update after checking):\n--- got\n%s\n--- want\n%s", p, got, want)
	}
}
