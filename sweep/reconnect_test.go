package sweep

import (
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"net"
	"path/filepath"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"loopsweep/instr"
)

// hangState is a fake bench that can stop answering, shared by every
// link (connection) opened to it. While hung, it behaves as an
// instrument whose firmware still executes what it is sent but answers
// no query (the simulator's ReplyDelay fault does the same): a
// generator command reaches the bench and then its error-queue check
// times out; a digitizer call times out with no effect. A link replaced
// by a reconnect is closed: its calls fail with net.ErrClosed.
type hangState struct {
	mu       sync.Mutex
	b        *fakeBench
	hangAt   int // the capture (1-based, over the whole run) that hangs; 0 never
	captures int
	hung     bool
	current  int // the id of the live link
}

type link struct {
	h  *hangState
	id int
}

// errHung is what a hung instrument's driver returns: the command it
// waited on, the address, and instr.ErrTimeout (as instr.Session.fail
// words it).
func errHung(cmd string) error {
	return fmt.Errorf("query %q on fake:5025: %w: nothing for 1s", cmd, instr.ErrTimeout)
}

// check says what a call on l gets before it reaches the bench: nil, a
// closed link's error, or (hung) the timeout of the query named.
func (l link) check(cmd string) (hung bool, err error) {
	l.h.mu.Lock()
	defer l.h.mu.Unlock()
	if l.id != l.h.current {
		return false, fmt.Errorf("write %q on fake:5025: %w", cmd, net.ErrClosed)
	}
	if l.h.hung {
		return true, errHung(cmd)
	}
	return false, nil
}

func (l link) SetFrequency(ctx context.Context, hz float64) error {
	hung, err := l.check("SYST:ERR?")
	if err != nil && !hung {
		return err
	}
	l.h.b.SetFrequency(ctx, hz)
	return err
}

func (l link) SetAmplitude(ctx context.Context, vpp float64) error {
	hung, err := l.check("SYST:ERR?")
	if err != nil && !hung {
		return err
	}
	l.h.b.SetAmplitude(ctx, vpp)
	return err
}

func (l link) SetOutput(ctx context.Context, on bool) error {
	hung, err := l.check("SYST:ERR?")
	if err != nil && !hung {
		return err
	}
	l.h.b.SetOutput(ctx, on)
	return err
}

func (l link) Configure(ctx context.Context, want instr.CaptureSettings) (instr.CaptureSettings, error) {
	if _, err := l.check("ACQ:POIN?"); err != nil {
		return instr.CaptureSettings{}, err
	}
	return l.h.b.Configure(ctx, want)
}

func (l link) Capture(ctx context.Context, ch1, ch2 []float64) error {
	if _, err := l.check("*OPC?"); err != nil {
		return err
	}
	l.h.mu.Lock()
	l.h.captures++
	if l.h.hangAt > 0 && l.h.captures == l.h.hangAt {
		l.h.hung = true
		l.h.mu.Unlock()
		return errHung("*OPC?")
	}
	l.h.mu.Unlock()
	return l.h.b.Capture(ctx, ch1, ch2)
}

// reconnector is a Config.Reconnect for hangState: it fails (as a
// driver identifying a hung instrument does) until outage tries have
// failed, then heals the bench and returns a new link, after turning
// the output off as a generator driver does when it connects. It
// samples the bench's output at every try.
type reconnector struct {
	h        *hangState
	outage   int              // tries that fail
	onTry    func(try int)    // called at each try, before anything else
	tries    int              // tries so far
	outputAt []bool           // the bench's output at each try
	healLog  int              // len(bench.log) when it healed
	healAt   time.Time        // the fake clock then
	now      func() time.Time // the engine's clock
	failErr  func(int) error  // the error of a failing try; nil: *IDN? timeout
	wrap     func(link) (Generator, Digitizer)
}

func (r *reconnector) Reconnect(ctx context.Context) (Generator, Digitizer, error) {
	r.tries++
	if r.onTry != nil {
		r.onTry(r.tries)
	}
	r.outputAt = append(r.outputAt, r.h.b.Output())
	if r.tries <= r.outage {
		if r.failErr != nil {
			return nil, nil, r.failErr(r.tries)
		}
		return nil, nil, fmt.Errorf("identify generator: %w", errHung("*IDN?"))
	}
	r.h.mu.Lock()
	r.h.hung = false
	r.h.current++
	l := link{h: r.h, id: r.h.current}
	r.h.mu.Unlock()
	r.h.b.SetOutput(ctx, false)
	r.h.b.mu.Lock()
	r.healLog = len(r.h.b.log)
	r.h.b.mu.Unlock()
	r.healAt = r.now()
	if r.wrap != nil {
		g, d := r.wrap(l)
		return g, d, nil
	}
	return l, l, nil
}

// reconnectRig is the engine rig with the bench behind links.
func reconnectRig(t *testing.T, hangAt, outage int) (*rig, *hangState, *reconnector) {
	t.Helper()
	r := newRig(t, injLoop3(2, 1000))
	// 100 Hz to 2 kHz: 14 points, each measured in one attempt on this
	// bench (above about 5 kHz the fake's channel 2 is small enough for
	// SNR retries, which would blur the count of attempts).
	r.cfg.Settings.StopHz = 2000
	r.cfg.Settings.RefineBudget = 0
	r.cfg.Out = filepath.Join(t.TempDir(), "s.json")
	h := &hangState{b: r.bench, hangAt: hangAt}
	l := link{h: h}
	r.cfg.Gen, r.cfg.Dig = l, l
	rc := &reconnector{h: h, outage: outage, now: r.clk.Now}
	r.cfg.Reconnect = rc.Reconnect
	return r, h, rc
}

func TestIsInstrumentFault(t *testing.T) {
	for _, c := range []struct {
		name string
		err  error
		want bool
	}{
		{"timeout", errHung("*OPC?"), true},
		{"timeout wrapped twice", fmt.Errorf("capture 1000 points at 1e3 Hz: %w", errHung("*OPC?")), true},
		{"closed by the instrument", fmt.Errorf("query %q on x: connection closed by the instrument: %w", "*IDN?", io.EOF), true},
		{"truncated", fmt.Errorf("block data: %w", io.ErrUnexpectedEOF), true},
		{"reset", &net.OpError{Op: "read", Net: "tcp", Err: syscall.ECONNRESET}, true},
		{"refused", fmt.Errorf("connect x: %w", syscall.ECONNREFUSED), true},
		{"closed link", fmt.Errorf("write: %w", net.ErrClosed), true},
		{"device gone", fmt.Errorf("read /dev/ttyUSB0: %w", syscall.EIO), true},
		{"instrument error", &instr.InstrumentError{Code: -222, Msg: "Data out of range"}, false},
		{"malformed reply", errors.New(`"*OPC?" replied "x", want 1`), false},
		{"cancelled", fmt.Errorf("query: %w", context.Canceled), false},
		{"shut down", fmt.Errorf("guard: %w (%w)", ErrShutdown, context.Canceled), false},
		{"context deadline", fmt.Errorf("query: %w", context.DeadlineExceeded), false},
		{"nil", nil, false},
	} {
		t.Run(c.name, func(t *testing.T) {
			if got := IsInstrumentFault(c.err); got != c.want {
				t.Errorf("IsInstrumentFault(%v) = %v, want %v", c.err, got, c.want)
			}
		})
	}
}

// Captures on this bench without a fault (counted in a run of the same
// plan): point 1 takes captures 1-4 (short ranging records during its
// settling wait, then its own record), each later point one more.

// TestReconnectResumesWithNoPointLost: the bench stops answering at the
// 6th capture (point 3's) and answers again on the 4th reconnection
// try. The run ends normally, every plan point has
// exactly one attempt and one PointMeasured (none lost, none twice),
// the point that failed is measured after the reconnection with the
// amplitude set before the output, the output is off at every try
// during the outage, the file holds every earlier point while waiting
// and the whole plan at the end.
func TestReconnectResumesWithNoPointLost(t *testing.T) {
	const hangAt, outage = 6, 3
	r, _, rc := reconnectRig(t, hangAt, outage)
	ch := make(chan Event)
	r.cfg.Events = ch
	e, err := New(r.cfg)
	if err != nil {
		t.Fatal(err)
	}
	plan := r.cfg.Settings.WithDefaults().Plan()
	measured := map[int]int{}
	var lost *InstrumentLost
	var back *Reconnected
	var retries []time.Duration
	var stateMsg string
	var savedWhileWaiting *Session
	var waiting *WaitingForInstruments
	offWhenWaiting := false
	err = collect(t, e, ch, func(ev Event) {
		switch ev := ev.(type) {
		case PointMeasured:
			measured[ev.Index]++
		case InstrumentLost:
			lost = &ev
		case WaitingForInstruments:
			waiting = &ev
			offWhenWaiting = !r.bench.Output()
			s, err := LoadSession(r.cfg.Out)
			if err != nil {
				t.Errorf("session file while waiting: %v", err)
				return
			}
			savedWhileWaiting = s
		case StateChanged:
			if ev.State == Reconnecting {
				stateMsg = ev.Msg
			}
		case ReconnectFailed:
			retries = append(retries, ev.Retry)
		case Reconnected:
			back = &ev
		}
	})
	if err != nil {
		t.Fatalf("Run: %v", err)
	}
	if lost == nil || back == nil || lost.Index != 2 {
		t.Fatalf("lost %+v, reconnected %+v: want the fault at point 3 and a reconnection", lost, back)
	}
	// The error names the command that went unanswered, and the state
	// says what the engine is doing about it.
	if !strings.Contains(lost.Err.Error(), `"*OPC?"`) || !errors.Is(lost.Err, instr.ErrTimeout) {
		t.Errorf("InstrumentLost.Err = %v, want the *OPC? timeout", lost.Err)
	}
	if !strings.Contains(stateMsg, `"*OPC?"`) || !strings.Contains(stateMsg, "reconnecting for up to 2m0s") {
		t.Errorf("Reconnecting state message %q", stateMsg)
	}
	// The off reached the hung generator (it executes what it is sent)
	// though its error check went unanswered, and the waiting event
	// says so.
	if waiting == nil || !offWhenWaiting || !errors.Is(waiting.OffErr, instr.ErrTimeout) || waiting.SaveErr != nil || waiting.Window != DefaultReconnectWindow {
		t.Errorf("WaitingForInstruments %+v with the output off %v; want the off sent, its check timed out, saved, the full window", waiting, offWhenWaiting)
	}
	if lost.Window != DefaultReconnectWindow {
		t.Errorf("window %v, want the default %v", lost.Window, DefaultReconnectWindow)
	}
	// Backoff: 250 ms doubling (DefaultReconnectBackoff, closed form
	// 0.25·2^k s) after each of the outage's failed tries.
	want := []time.Duration{250 * time.Millisecond, 500 * time.Millisecond, time.Second}
	if fmt.Sprint(retries) != fmt.Sprint(want) {
		t.Errorf("waits between tries %v, want %v", retries, want)
	}
	if back.Tries != outage+1 || rc.tries != outage+1 {
		t.Errorf("reconnected after %d tries (hook called %d times), want %d", back.Tries, rc.tries, outage+1)
	}
	if back.Index != lost.Index || back.FreqHz != lost.FreqHz {
		t.Errorf("resumes at point %d (%g Hz), the fault hit point %d (%g Hz)", back.Index, back.FreqHz, lost.Index, lost.FreqHz)
	}
	// The output was off at every try (the engine's off reached the
	// hung generator) and the generator was driven again in the safe
	// order after the heal: amplitude, then output on.
	for i, on := range rc.outputAt {
		if on {
			t.Errorf("output on at reconnection try %d", i+1)
		}
	}
	after := r.bench.log[rc.healLog:]
	firstAmp, firstOn := -1, -1
	for i, l := range after {
		if firstAmp < 0 && strings.HasPrefix(l, "amp ") {
			firstAmp = i
		}
		if firstOn < 0 && l == "output true" {
			firstOn = i
		}
	}
	if firstAmp < 0 || firstOn < 0 || firstAmp > firstOn {
		t.Errorf("after the reconnect: first amplitude at %d, output on at %d; want the amplitude first (log %q)", firstAmp, firstOn, after[:min(len(after), 6)])
	}
	// No point lost, none measured twice, the failed attempt not
	// recorded: the plan's points each have one attempt and one event.
	s := e.Snapshot()
	if len(s.Points) != len(plan) || !s.Complete {
		t.Fatalf("session has %d points (complete %v), the plan %d", len(s.Points), s.Complete, len(plan))
	}
	for i, p := range s.Points {
		if len(p.Attempts) != 1 || measured[i] != 1 {
			t.Errorf("point %d (%g Hz): %d attempts, %d PointMeasured; want 1 and 1", i+1, p.FreqHz, len(p.Attempts), measured[i])
		}
	}
	if a := s.Points[lost.Index].Attempts[0]; a.Started.Before(rc.healAt) {
		t.Errorf("the failed point's attempt started %v, before the reconnection at %v: the failed attempt was kept", a.Started, rc.healAt)
	}
	// While waiting, the file held every point measured before the fault.
	if savedWhileWaiting == nil {
		t.Fatal("no session file while waiting")
	}
	for i := 0; i < lost.Index; i++ {
		if len(savedWhileWaiting.Points[i].Attempts) != 1 {
			t.Errorf("while waiting, the file's point %d has %d attempts, want 1", i+1, len(savedWhileWaiting.Points[i].Attempts))
		}
	}
	if n := len(savedWhileWaiting.Points[lost.Index].Attempts); n != 0 {
		t.Errorf("while waiting, the failed point has %d attempts in the file, want 0", n)
	}
	final, err := LoadSession(r.cfg.Out)
	if err != nil {
		t.Fatal(err)
	}
	if countMeasured(*final) != len(plan) || !final.Complete {
		t.Errorf("file holds %d of %d points (complete %v)", countMeasured(*final), len(plan), final.Complete)
	}
	if r.bench.Output() {
		t.Error("output on after Run")
	}
}

// TestReconnectGivesUpAfterWindow: an instrument that never answers
// again. With a 10 s window and the default backoff the tries come at
// 0, 0.25, 0.75, 1.75, 3.75 and 7.75 s (waits 0.25·2^k s) and the last
// at 10 s (the 5 s wait cut to the window's end): 7 tries. Run then
// fails naming the fault's command and the last try's error, the output
// is off and the file holds the points measured before.
func TestReconnectGivesUpAfterWindow(t *testing.T) {
	r, _, rc := reconnectRig(t, 7, 1<<30)
	r.cfg.ReconnectWindow = 10 * time.Second
	var start, end time.Time
	rc.onTry = func(try int) {
		if try == 1 {
			start = r.clk.Now()
		}
		end = r.clk.Now()
	}
	e, err := New(r.cfg)
	if err != nil {
		t.Fatal(err)
	}
	err = e.Run(context.Background())
	if err == nil {
		t.Fatal("Run succeeded with an instrument that never came back")
	}
	for _, w := range []string{"gave up reconnecting after 10s", "7 tries", `"*IDN?"`, `"*OPC?"`} {
		if !strings.Contains(err.Error(), w) {
			t.Errorf("error %q lacks %q", err, w)
		}
	}
	if !errors.Is(err, instr.ErrTimeout) {
		t.Errorf("error does not wrap the fault's timeout: %v", err)
	}
	if rc.tries != 7 || end.Sub(start) != 10*time.Second {
		t.Errorf("%d tries over %v, want 7 over 10s", rc.tries, end.Sub(start))
	}
	if e.State() != Failed {
		t.Errorf("state %v, want failed", e.State())
	}
	if r.bench.Output() {
		t.Error("output on after giving up")
	}
	s, err := LoadSession(r.cfg.Out)
	if err != nil {
		t.Fatal(err)
	}
	// Captures 1-6 measured points 1-3; capture 7, point 4's, hung.
	n := countMeasured(*s)
	if n != 3 || n != countMeasured(e.Snapshot()) || s.Complete {
		t.Errorf("file holds %d points (engine %d, complete %v)", n, countMeasured(e.Snapshot()), s.Complete)
	}
}

// TestReconnectPausedAndStoppedWhileWaiting: Pause during the wait stops
// the tries (the output stays off, the state is Paused), Resume tries
// again and the sweep completes with every point once; Stop during the
// wait ends Run at once with the state Stopped and the output off.
func TestReconnectPausedAndStoppedWhileWaiting(t *testing.T) {
	t.Run("pause then resume", func(t *testing.T) {
		r, _, rc := reconnectRig(t, 5, 1<<30)
		ch := make(chan Event)
		r.cfg.Events = ch
		e, err := New(r.cfg)
		if err != nil {
			t.Fatal(err)
		}
		rc.onTry = func(try int) {
			if try == 2 {
				e.Pause() // while the hook runs, as a key press could
			}
		}
		triesAtPause, pausedOutput := -1, true
		err = collect(t, e, ch, func(ev Event) {
			if st, ok := ev.(StateChanged); ok && st.State == Paused {
				triesAtPause, pausedOutput = rc.tries, r.bench.Output()
				rc.outage = rc.tries // the bench is fixed while paused
				e.Resume()
			}
		})
		if err != nil {
			t.Fatalf("Run: %v", err)
		}
		if triesAtPause != 2 || pausedOutput {
			t.Errorf("paused after %d tries with the output %v; want 2 and off", triesAtPause, pausedOutput)
		}
		if rc.tries != 3 {
			t.Errorf("%d tries, want 2 before the pause and 1 after", rc.tries)
		}
		s := e.Snapshot()
		for i, p := range s.Points {
			if len(p.Attempts) != 1 {
				t.Errorf("point %d has %d attempts, want 1", i+1, len(p.Attempts))
			}
		}
		if !s.Complete || e.State() != Done {
			t.Errorf("complete %v state %v", s.Complete, e.State())
		}
	})
	t.Run("stop", func(t *testing.T) {
		r, _, rc := reconnectRig(t, 5, 1<<30)
		e, err := New(r.cfg)
		if err != nil {
			t.Fatal(err)
		}
		rc.onTry = func(try int) {
			if try == 3 {
				e.Stop()
			}
		}
		if err := e.Run(context.Background()); err != nil {
			t.Fatalf("Run after Stop: %v", err)
		}
		if rc.tries != 3 || e.State() != Stopped || r.bench.Output() {
			t.Errorf("%d tries, state %v, output %v; want 3, stopped, off", rc.tries, e.State(), r.bench.Output())
		}
		s, err := LoadSession(r.cfg.Out)
		if err != nil {
			t.Fatal(err)
		}
		if countMeasured(*s) != countMeasured(e.Snapshot()) {
			t.Errorf("file holds %d points, the engine %d", countMeasured(*s), countMeasured(e.Snapshot()))
		}
	})
}

// TestReconnectMidRetryKeepsAttempts: the fault hits the retry of a
// point that drowns in noise. Its first (bad) attempt stays, the retry
// that failed is not recorded, and after the reconnection the point
// gets only the attempts it had left: MaxAttempts in all, then it is
// flagged, as without the fault.
func TestReconnectMidRetryKeepsAttempts(t *testing.T) {
	r := newRig(t, injLoop3(2, 1000))
	r.cfg.Settings.StopHz = 1000
	r.cfg.Settings.RefineBudget = 0
	const bad = 398.1 // a plan point, 100·10^0.6 Hz
	r.bench.noiseAt = func(f float64) float64 {
		if math.Abs(f-bad) < 2 {
			return 2
		}
		return 0
	}
	h := &hangState{b: r.bench}
	l := link{h: h}
	r.cfg.Gen, r.cfg.Dig = l, l
	rc := &reconnector{h: h, outage: 1, now: r.clk.Now}
	r.cfg.Reconnect = rc.Reconnect
	ch := make(chan Event)
	r.cfg.Events = ch
	e, err := New(r.cfg)
	if err != nil {
		t.Fatal(err)
	}
	armed := false
	err = collect(t, e, ch, func(ev Event) {
		// The bad point's first attempt is in: hang its retry's capture.
		if pm, ok := ev.(PointMeasured); ok && math.Abs(pm.Point.FreqHz-bad) < 1 && len(pm.Point.Attempts) == 1 && !armed {
			armed = true
			h.mu.Lock()
			h.hangAt = h.captures + 1
			h.mu.Unlock()
		}
	})
	if err != nil {
		t.Fatalf("Run: %v", err)
	}
	if !armed || rc.tries != 2 {
		t.Fatalf("armed %v, %d tries: the retry never hung", armed, rc.tries)
	}
	for _, p := range e.Snapshot().Points {
		if math.Abs(p.FreqHz-bad) > 1 {
			if len(p.Attempts) != 1 {
				t.Errorf("point %g Hz has %d attempts, want 1", p.FreqHz, len(p.Attempts))
			}
			continue
		}
		if len(p.Attempts) != r.cfg.Settings.MaxAttempts || !p.Flagged {
			t.Errorf("noisy point: %d attempts, flagged %v; want %d and flagged", len(p.Attempts), p.Flagged, r.cfg.Settings.MaxAttempts)
		}
		for k, a := range p.Attempts[1:] {
			if !strings.HasPrefix(a.Reason, "retry: ") {
				t.Errorf("attempt %d reason %q, want a retry", k+2, a.Reason)
			}
			if a.Cycles <= p.Attempts[k].Cycles {
				t.Errorf("attempt %d has %g cycles after %g: the retry lost its growth", k+2, a.Cycles, p.Attempts[k].Cycles)
			}
		}
	}
}

// TestNoReconnectHookFailsAsBefore: without Config.Reconnect a timeout
// fails the sweep (or pauses it with PauseOnError), as before.
func TestNoReconnectHookFailsAsBefore(t *testing.T) {
	r, _, _ := reconnectRig(t, 3, 0)
	r.cfg.Reconnect = nil
	e, err := New(r.cfg)
	if err != nil {
		t.Fatal(err)
	}
	err = e.Run(context.Background())
	if !errors.Is(err, instr.ErrTimeout) || e.State() != Failed {
		t.Errorf("Run = %v in state %v, want the timeout and failed", err, e.State())
	}
}

// TestReconnectThroughGuard: the engine behind a Guard whose generator
// the hook replaces (Guard.Replace, as the sweep command does): after
// the reconnection the guard refuses to enable the output before an
// amplitude was set on the new link, and the sweep completes.
func TestReconnectThroughGuard(t *testing.T) {
	r, h, rc := reconnectRig(t, 5, 2)
	g, err := NewGuard(link{h: h}, r.cfg.Settings.MaxAmpVpp, func(d time.Duration) { r.clk.advance(d) })
	if err != nil {
		t.Fatal(err)
	}
	r.cfg.Gen = g
	rc.wrap = func(l link) (Generator, Digitizer) {
		if err := g.Replace(l); err != nil {
			t.Error(err)
		}
		// Straight after Replace the guard knows no amplitude.
		if err := g.SetOutput(context.Background(), true); !errors.Is(err, ErrNoAmplitude) {
			t.Errorf("output on right after Replace: %v, want ErrNoAmplitude", err)
		}
		return g, l
	}
	e, err := New(r.cfg)
	if err != nil {
		t.Fatal(err)
	}
	if err := e.Run(context.Background()); err != nil {
		t.Fatalf("Run: %v", err)
	}
	if rc.tries != 3 {
		t.Errorf("%d tries, want 3", rc.tries)
	}
	if n, want := countMeasured(e.Snapshot()), len(r.cfg.Settings.WithDefaults().Plan()); n != want {
		t.Errorf("%d of %d points measured", n, want)
	}
	if r.bench.Output() || g.OutputOn() {
		t.Error("output on after Run")
	}
}

// TestReconnectRepeatedFaultKeepsWindow: a bench that connects again at
// once but stops answering at the first capture after every
// reconnection. No attempt is ever measured after the first fault, so
// the window runs from that fault and is not renewed by each
// reconnection: Run fails once it has passed (here 1 s of the fake
// clock, which the settling waits advance), instead of cycling forever.
func TestReconnectRepeatedFaultKeepsWindow(t *testing.T) {
	r, h, rc := reconnectRig(t, 7, 0)
	r.cfg.ReconnectWindow = time.Second
	var faultAt time.Time
	rc.onTry = func(try int) {
		if try == 1 {
			faultAt = r.clk.Now()
		}
		// The next capture, the first after this reconnection, hangs.
		h.mu.Lock()
		h.hangAt = h.captures + 1
		h.mu.Unlock()
	}
	e, err := New(r.cfg)
	if err != nil {
		t.Fatal(err)
	}
	done := make(chan error, 1)
	go func() { done <- e.Run(context.Background()) }()
	select {
	case err = <-done:
	case <-time.After(20 * time.Second):
		e.Stop()
		t.Fatalf("still running after 20 s and %d reconnections: the window is renewed by every reconnection", rc.tries)
	}
	if err == nil || !strings.Contains(err.Error(), "gave up reconnecting after 1s") || !strings.Contains(err.Error(), "before any attempt was measured") {
		t.Fatalf("Run = %v, want the give-up of a bench that fails again at once", err)
	}
	if elapsed := r.clk.Now().Sub(faultAt); elapsed < time.Second || rc.tries < 2 {
		t.Errorf("gave up %v after the first fault, after %d reconnections; want at least the 1 s window and several", elapsed, rc.tries)
	}
	if n := countMeasured(e.Snapshot()); n != 3 {
		t.Errorf("%d points measured, want the 3 before the fault", n)
	}
	if r.bench.Output() {
		t.Error("output on after giving up")
	}
}

// TestReconnectGiveUpPausesWithPauseOnError: on a front end that pauses
// on errors (the bench screen), giving up pauses the sweep with the
// give-up error published; the user repairs the bench and resumes, which
// tries again for a new window, and the sweep completes with every point
// once.
func TestReconnectGiveUpPausesWithPauseOnError(t *testing.T) {
	r, _, rc := reconnectRig(t, 6, 1<<30)
	r.cfg.ReconnectWindow = 2 * time.Second
	r.cfg.PauseOnError = true
	ch := make(chan Event)
	r.cfg.Events = ch
	e, err := New(r.cfg)
	if err != nil {
		t.Fatal(err)
	}
	var gaveUp error
	triesAtPause := 0
	err = collect(t, e, ch, func(ev Event) {
		switch ev := ev.(type) {
		case ErrorEvent:
			gaveUp = ev.Err
		case StateChanged:
			if ev.State == Paused && triesAtPause == 0 {
				triesAtPause = rc.tries
				if r.bench.Output() {
					t.Error("output on while paused after giving up")
				}
				rc.outage = rc.tries // repaired
				e.Resume()
			}
		}
	})
	if err != nil {
		t.Fatalf("Run: %v", err)
	}
	if gaveUp == nil || !strings.Contains(gaveUp.Error(), "gave up reconnecting after 2s") {
		t.Errorf("give-up error %v", gaveUp)
	}
	// 2 s window, 0.25 s doubling: tries at 0, 0.25, 0.75, 1.75 and 2 s.
	if triesAtPause != 5 || rc.tries != 6 {
		t.Errorf("paused after %d tries, %d in all; want 5 and one more after Resume", triesAtPause, rc.tries)
	}
	s := e.Snapshot()
	for i, p := range s.Points {
		if len(p.Attempts) != 1 {
			t.Errorf("point %d has %d attempts, want 1", i+1, len(p.Attempts))
		}
	}
	if !s.Complete || e.State() != Done {
		t.Errorf("complete %v, state %v", s.Complete, e.State())
	}
}
