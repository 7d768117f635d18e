package sweep

// Tests of what the engine overlaps with the physical waits (the
// session save, the first point's ranging) and of what it must not give
// up for it: every point is on disk before the next capture and before
// the next PointStarted, and no capture starts before the settling time.

import (
	"context"
	"errors"
	"os"
	"path/filepath"
	"sync"
	"testing"
	"time"

	"loopsweep/analysis"
	"loopsweep/instr"
)

// attemptsIn counts the attempts a session holds.
func attemptsIn(s Session) int {
	n := 0
	for _, p := range s.Points {
		n += len(p.Attempts)
	}
	return n
}

// attemptsOnDisk counts the attempts in the session file at path; 0
// when it does not exist yet.
func attemptsOnDisk(t *testing.T, path string) int {
	t.Helper()
	if _, err := os.Stat(path); errors.Is(err, os.ErrNotExist) {
		return 0
	}
	s, err := LoadSession(path)
	if err != nil {
		t.Fatalf("load %s mid-sweep: %v", path, err)
	}
	return attemptsIn(*s)
}

// savedBeforeCapture is a digitizer that, before each capture, compares
// the attempts in the session file with the engine's own.
type savedBeforeCapture struct {
	*fakeBench
	t        *testing.T
	out      string
	eng      func() *Engine
	captures int
	behind   int
}

func (d *savedBeforeCapture) Capture(ctx context.Context, ch1, ch2 []float64) error {
	d.captures++
	if mem, disk := attemptsIn(d.eng().Snapshot()), attemptsOnDisk(d.t, d.out); disk != mem {
		d.behind++
		d.t.Errorf("capture %d: the file holds %d attempts, the engine %d", d.captures, disk, mem)
	}
	return d.fakeBench.Capture(ctx, ch1, ch2)
}

// README/issue 5: the session is saved after every completed point. With
// one attempt per job, every attempt the engine holds when a capture
// starts belongs to an earlier job, so the file must hold all of them.
func TestSessionOnDiskBeforeEveryCapture(t *testing.T) {
	r := newRig(t, injLoop3(2, 1000))
	r.cfg.Settings.MaxAttempts = 1
	r.cfg.Settings.RefineBudget = 0
	out := filepath.Join(t.TempDir(), "s.json")
	r.cfg.Out = out
	var e *Engine
	d := &savedBeforeCapture{fakeBench: r.bench, t: t, out: out, eng: func() *Engine { return e }}
	r.cfg.Dig = d
	var err error
	if e, err = New(r.cfg); err != nil {
		t.Fatal(err)
	}
	if err := e.Run(context.Background()); err != nil {
		t.Fatalf("Run: %v", err)
	}
	s := e.Snapshot()
	if d.captures < len(s.Points) {
		t.Fatalf("%d captures for %d points", d.captures, len(s.Points))
	}
	if got, want := attemptsOnDisk(t, out), attemptsIn(s); got != want {
		t.Errorf("after Run the file holds %d attempts, the engine %d", got, want)
	}
}

// The bench command's safety contract (cmd/loopsweep safety_e2e_test:
// startedUpTo): when "point k" is announced, points before it are saved.
func TestPointStartedAfterSave(t *testing.T) {
	r := newRig(t, injLoop3(2, 1000))
	out := filepath.Join(t.TempDir(), "s.json")
	r.cfg.Out = out
	events := make(chan Event, 1)
	r.cfg.Events = events
	e, err := New(r.cfg)
	if err != nil {
		t.Fatal(err)
	}
	done := make(chan error, 1)
	go func() { done <- e.Run(context.Background()) }()
	// A job's retries are saved with it, at its end: the check is made
	// at the first PointStarted of each job (a new index), against the
	// attempts measured by the jobs before it. Each PointMeasured is one
	// more attempt; the file never loses one once written.
	measured, before, checked, last := 0, 0, 0, -1
	for ev := range events {
		switch ev := ev.(type) {
		case PointMeasured:
			measured++
		case PointStarted:
			if ev.Index != last || ev.Attempt == 1 {
				before = measured
				if disk := attemptsOnDisk(t, out); disk < before {
					t.Errorf("PointStarted %d (attempt %d): the file holds %d attempts, earlier jobs measured %d", ev.Index, ev.Attempt, disk, before)
				}
				checked++
			}
			last = ev.Index
		}
	}
	if err := <-done; err != nil {
		t.Fatalf("Run: %v", err)
	}
	if checked < 10 {
		t.Errorf("only %d PointStarted events checked", checked)
	}
}

// captureLog records, for every capture, the fake clock and the record
// length, and when the generator's output went on.
type captureLog struct {
	*fakeBench
	mu   sync.Mutex
	at   []time.Time
	n    []int
	onAt time.Time
}

func (c *captureLog) SetOutput(ctx context.Context, on bool) error {
	if on && !c.fakeBench.Output() {
		c.mu.Lock()
		c.onAt = c.clk.Now()
		c.mu.Unlock()
	}
	return c.fakeBench.SetOutput(ctx, on)
}

func (c *captureLog) Capture(ctx context.Context, ch1, ch2 []float64) error {
	c.mu.Lock()
	c.at = append(c.at, c.clk.Now())
	c.n = append(c.n, len(ch1))
	c.mu.Unlock()
	return c.fakeBench.Capture(ctx, ch1, ch2)
}

// The first point has no earlier reading for its input windows: they are
// learned from short records inside its settling wait, and its own
// record is captured once, after the whole wait.
func TestFirstPointRangesWhileSettling(t *testing.T) {
	r := newRig(t, injLoop3(2, 1000))
	s := &r.cfg.Settings
	s.StartHz, s.StopHz, s.PerDecade = 100, 1000, 5
	s.RefineBudget = 0
	c := &captureLog{fakeBench: r.bench}
	r.cfg.Gen, r.cfg.Dig = c, c
	_, sess := r.run(t)
	first, ok := sess.Chosen(0)
	if !ok {
		t.Fatal("no attempt at the first point")
	}
	// Settling: 10 cycles at 100 Hz (Defaults: SettleCycles 10, SettleMin
	// 10 ms) = 100 ms from the output going on.
	settled := c.onAt.Add(100 * time.Millisecond)
	full := -1
	for i, n := range c.n {
		if n == first.RecordLength {
			full = i
			break
		}
		if !c.at[i].Before(settled) {
			t.Errorf("ranging capture %d at %v after output on, not inside the 100 ms settling wait", i, c.at[i].Sub(c.onAt))
		}
	}
	if full < 1 {
		t.Fatalf("captures %v: no short ranging record before the first point's %d-sample record", c.n, first.RecordLength)
	}
	if c.at[full].Before(settled) {
		t.Errorf("the first point's record started %v after output on, before the 100 ms settling time", c.at[full].Sub(c.onAt))
	}
	if full+1 < len(c.n) && c.n[full+1] == first.RecordLength {
		t.Errorf("the first point's %d-sample record was captured again (captures %v)", first.RecordLength, c.n)
	}
}

// The window must hold the raw samples about its own centre. With AC
// coupling the centre stays at 0 V while the fit's DC can sit millivolts
// away (a ripple aliased near 0 Hz counts as DC): a window sized from the
// excursion about the fitted DC would be too small.
func TestAutorangeHoldsRawSamplesAboutCentre(t *testing.T) {
	r := newRig(t, injLoop3(2, 1000))
	r.cfg.ACCoupling = true
	e, err := New(r.cfg)
	if err != nil {
		t.Fatal(err)
	}
	e.dcKnown, e.ranged = true, true
	ch := instr.ChannelSettings{RangeV: 5e-3, AC: true}
	got := instr.CaptureSettings{Points: 1000, IntervalS: 1e-5, Channels: [2]instr.ChannelSettings{ch, ch}}
	// Tone 0.9 mV peak, noise 0.19 mV rms, fitted DC 3 mV; the raw samples
	// reach 4.9 mV above the window's centre and 1.5 mV below it.
	tone := analysis.Tone{AmpPeak: 0.9e-3, NoiseRMS: 0.19e-3, DC: 3e-3}
	ext := extent{lo: -1.5e-3, hi: 4.9e-3}
	e.autorange(tone, tone, [2]extent{ext, ext}, got)
	for c := range e.chans {
		// The 1.5× headroom over the largest excursion is swingHeadroom's
		// documented rule; the excursion, 4.9 mV, is read off ext above.
		if w := e.chans[c].RangeV; w < 1.5*4.9e-3 {
			t.Errorf("channel %d: window ±%.2f mV for samples reaching 4.9 mV from its centre", c+1, w*1e3)
		}
		if e.chans[c].OffsetV != 0 {
			t.Errorf("channel %d: an AC-coupled window moved to %g V", c+1, e.chans[c].OffsetV)
		}
	}
}

// realSleep must never end a settling wait early, and must still end at
// once when its context is cancelled.
func TestRealSleep(t *testing.T) {
	for _, d := range []time.Duration{300 * time.Microsecond, 2 * time.Millisecond, 7 * time.Millisecond} {
		t0 := time.Now()
		if err := realSleep(context.Background(), d); err != nil {
			t.Fatalf("realSleep(%v): %v", d, err)
		}
		if el := time.Since(t0); el < d {
			t.Errorf("realSleep(%v) returned after %v", d, el)
		}
	}
	ctx, cancel := context.WithCancel(context.Background())
	time.AfterFunc(5*time.Millisecond, cancel)
	t0 := time.Now()
	if err := realSleep(ctx, time.Minute); !errors.Is(err, context.Canceled) {
		t.Errorf("cancelled realSleep = %v, want context.Canceled", err)
	}
	if el := time.Since(t0); el > 30*time.Second {
		t.Errorf("cancelled realSleep returned after %v", el)
	}
}
