package sweep

import (
	"context"
	"errors"
	"fmt"
	"math"
	"sort"
	"sync"
	"time"

	"loopsweep/instr"
)

// ErrorDrainer is implemented by instruments that keep an error queue
// (SCPI SYSTem:ERRor?). DrainErrors reads the queue until it is empty and
// returns an error describing every instrument-reported error, or nil
// when there was none. The engine calls it after setup and after every
// point when the Generator or Digitizer offers it.
type ErrorDrainer interface {
	DrainErrors(ctx context.Context) error
}

// Config is what New needs. Gen and Dig are required; the other zero
// values are documented per field.
type Config struct {
	Settings Settings // zero fields filled by WithDefaults
	Gen      Generator
	Dig      Digitizer

	// Out is the session file, saved atomically after every point;
	// empty means the session is only kept in memory.
	Out string
	// Session continues an interrupted session (resume): its points,
	// attempts and settings are kept, Settings above is ignored, and the
	// points without an attempt are measured.
	Session *Session
	// Calibration is a channel calibration to apply; nil applies none.
	Calibration *Calibration

	Instruments    Instruments // recorded in the session
	OperatingPoint string      // label recorded in the session
	ToolVersion    string

	// ACCoupling says the digitizer offers AC coupling; otherwise the DC
	// operating point is measured on the first capture and each
	// channel's offset is set to it.
	ACCoupling bool
	// FixedOffset says the digitizer cannot move a channel's window
	// (no offset setting): ranges then cover the DC level as well.
	FixedOffset bool
	// MaxPoints is the digitizer's longest record per channel; zero
	// means 65536.
	MaxPoints int
	// InitialRangeV is the first capture's range (input window ±range);
	// zero means 20 V. MaxRangeV is the largest range tried when a
	// channel clips; zero means 200 V. MinRangeV is the smallest range
	// asked for; zero means 1 mV.
	InitialRangeV, MaxRangeV, MinRangeV float64

	// PauseOnError pauses the engine on an instrument error (the user
	// can fix the bench and Resume); otherwise the sweep fails.
	PauseOnError bool
	// Linger keeps Run waiting for commands after the plan and the
	// refinement are done, until Stop or the context ends (for an
	// interactive front end that may re-measure afterwards).
	Linger bool

	// Reconnect, when set, is how the engine recovers from an instrument
	// fault (IsInstrumentFault: a timeout, a lost connection) within the
	// same run: the failed attempt is dropped, the output turned off
	// (best effort), the session saved, and Reconnect called, with a
	// backoff between tries, until it succeeds, Pause or Stop interrupt
	// it (they cancel its ctx), or ReconnectWindow passes. It must open
	// the instruments afresh and return the generator and digitizer to
	// use from then on, identified, set up, with the output off and
	// empty error queues; it closes what it replaces and what a failed
	// try opened. The engine then applies the settings again (amplitude
	// before the output is enabled) and resumes at the point that failed.
	// Nil keeps the behaviour without it: pause (PauseOnError) or fail.
	Reconnect func(ctx context.Context) (Generator, Digitizer, error)
	// ReconnectWindow is how long Reconnect is retried before the engine
	// gives up: then it pauses (PauseOnError; Resume tries again for a
	// new window) or fails. Zero means DefaultReconnectWindow.
	ReconnectWindow time.Duration
	// ReconnectBackoff is the wait after the first failed try; it doubles
	// after each further one, up to MaxReconnectBackoff. Zero means
	// DefaultReconnectBackoff.
	ReconnectBackoff time.Duration

	// Sleep waits d or until ctx ends; nil means a real timer.
	Sleep func(ctx context.Context, d time.Duration) error
	// Now is the clock; nil means time.Now.
	Now func() time.Time
	// Events receives every event. Sends block until the receiver takes
	// them (or Stop is called), so the receiver must keep reading; Run
	// closes the channel when it returns. Nil publishes nothing.
	Events chan<- Event
}

// Engine runs one measurement session. Run drives the instruments from
// one goroutine; the command methods (Pause, Resume, Remeasure,
// RemeasureFlagged, UpdateSettings, Stop, AddNote, Save, Snapshot, State)
// are safe to call from any goroutine at any time.
type Engine struct {
	cfg Config

	mu         sync.Mutex
	sess       Session
	set        Settings
	state      State
	paused     bool
	stopped    bool
	queue      []job
	cancelStep context.CancelFunc
	wake       chan struct{}
	quit       chan struct{}
	ran        bool
	checked    map[float64]bool // plan points already judged against their neighbours
	refineUsed int
	refineTry  map[float64]int
	// windowStart is when the reconnection window in force began; zero:
	// none. A fault after a reconnection with no attempt measured since
	// keeps it (reconnect.go).
	windowStart time.Time

	saveMu sync.Mutex

	// Run's goroutine only.
	outputOn            bool
	autoAmp             float64 // the level control's amplitude for the next point
	ampCeiling          float64 // above this the response was found nonlinear; 0: none
	freqNow             float64
	ampNow              float64
	chans               [2]instr.ChannelSettings
	dcKnown             bool
	ranged              bool       // the input windows were set from a reading (autorange)
	fault               error      // the instrument fault being recovered from; nil: none
	faultAt             time.Time  // when it happened
	faultFreq           float64    // the point it hit
	attemptsAtReconnect int        // attempts in the session at the last reconnection; −1: none
	unsaved             bool       // the last point is not on disk yet: the next job saves it (runJob)
	saveDone            chan error // that save, running while the next point settles
	lastWant            instr.CaptureSettings
	lastGot             instr.CaptureSettings
	dtCache             map[float64]float64 // asked sample interval → the digitizer's
	haveGot             bool
	buf1                []float64
	buf2                []float64
}

// job is one unit of work: measure the point at freq (looked up when the
// job runs, since refinement inserts points).
type job struct {
	freq     float64
	override *Settings
	reason   string
	insert   bool // refinement: insert a new point at freq
	cyclesX  int  // multiply the cycle count (refinement, neighbour retry)
	attempts int  // attempts allowed; 0 means MaxAttempts
}

// errInterrupted reports that a Pause or Stop cut a job short.
var errInterrupted = errors.New("interrupted")

// ErrStopped is returned by commands given after the engine has ended.
var ErrStopped = errors.New("sweep: engine has stopped")

// New checks the configuration and settings and prepares a session. It
// touches no instrument: bad settings are reported before the output is
// ever enabled.
func New(cfg Config) (*Engine, error) {
	if cfg.Gen == nil || cfg.Dig == nil {
		return nil, errors.New("sweep: a generator and a digitizer are required")
	}
	if cfg.Sleep == nil {
		cfg.Sleep = realSleep
	}
	if cfg.Now == nil {
		cfg.Now = time.Now
	}
	if cfg.MaxPoints <= 0 {
		cfg.MaxPoints = 65536
	}
	if cfg.InitialRangeV <= 0 {
		cfg.InitialRangeV = 20
	}
	if cfg.MaxRangeV <= 0 {
		cfg.MaxRangeV = 200
	}
	if cfg.MinRangeV <= 0 {
		cfg.MinRangeV = 1e-3
	}
	if cfg.ReconnectWindow <= 0 {
		cfg.ReconnectWindow = DefaultReconnectWindow
	}
	if cfg.ReconnectBackoff <= 0 {
		cfg.ReconnectBackoff = DefaultReconnectBackoff
	}
	e := &Engine{
		cfg:       cfg,
		wake:      make(chan struct{}, 1),
		quit:      make(chan struct{}),
		checked:   map[float64]bool{},
		refineTry: map[float64]int{},
		dtCache:   map[float64]float64{},

		attemptsAtReconnect: -1,
	}
	now := cfg.Now()
	if cfg.Session != nil {
		e.sess = copySession(*cfg.Session)
		e.set = e.sess.Settings.WithDefaults()
		if err := e.set.Validate(); err != nil {
			return nil, fmt.Errorf("resumed session settings: %w", err)
		}
		e.sess.Complete = false
		if len(e.sess.Points) == 0 {
			e.sess.Points = planPoints(e.set.Plan())
		}
		// Plan points already measured need no neighbour re-check.
		for _, p := range e.sess.Points {
			if len(p.Attempts) > 0 {
				e.checked[p.FreqHz] = true
			}
		}
	} else {
		e.set = cfg.Settings.WithDefaults()
		if err := e.set.Validate(); err != nil {
			return nil, err
		}
		e.sess = Session{
			Schema:         SchemaVersion,
			ToolVersion:    cfg.ToolVersion,
			Created:        now,
			Updated:        now,
			OperatingPoint: cfg.OperatingPoint,
			Settings:       e.set,
			Instruments:    cfg.Instruments,
			Points:         planPoints(e.set.Plan()),
		}
	}
	if cfg.Calibration != nil {
		e.sess.Calibration = cfg.Calibration.Name
	}
	if len(e.sess.Points) == 0 {
		return nil, &SettingError{Setting: "frequencies_hz", Msg: "the plan has no points"}
	}
	e.chans = [2]instr.ChannelSettings{{RangeV: cfg.InitialRangeV, AC: cfg.ACCoupling}, {RangeV: cfg.InitialRangeV, AC: cfg.ACCoupling}}
	e.dcKnown = cfg.ACCoupling
	return e, nil
}

func planPoints(fs []float64) []Point {
	pts := make([]Point, len(fs))
	for i, f := range fs {
		pts[i] = Point{FreqHz: f, Chosen: -1}
	}
	return pts
}

// Settings returns the settings in force.
func (e *Engine) Settings() Settings {
	e.mu.Lock()
	defer e.mu.Unlock()
	return e.set
}

// State returns the engine's state.
func (e *Engine) State() State {
	e.mu.Lock()
	defer e.mu.Unlock()
	return e.state
}

// Snapshot returns a deep copy of the session as it stands.
func (e *Engine) Snapshot() Session {
	e.mu.Lock()
	defer e.mu.Unlock()
	return copySession(e.sess)
}

func copySession(s Session) Session {
	s.Notes = append([]Note(nil), s.Notes...)
	s.Settings = copySettings(s.Settings)
	pts := make([]Point, len(s.Points))
	for i, p := range s.Points {
		p.Attempts = append([]Attempt(nil), p.Attempts...)
		pts[i] = p
	}
	s.Points = pts
	return s
}

func copySettings(s Settings) Settings {
	s.Frequencies = append([]float64(nil), s.Frequencies...)
	s.AmpProfile = append([]AmpBreak(nil), s.AmpProfile...)
	return s
}

func (e *Engine) signal() {
	select {
	case e.wake <- struct{}{}:
	default:
	}
}

// Pause stops the sweep at the next safe moment (an interrupted attempt
// is measured again on Resume) and turns the generator's output off.
func (e *Engine) Pause() {
	e.mu.Lock()
	e.paused = true
	if e.cancelStep != nil {
		e.cancelStep()
	}
	e.mu.Unlock()
	e.signal()
}

// Resume continues a paused sweep.
func (e *Engine) Resume() {
	e.mu.Lock()
	e.paused = false
	e.windowStart = time.Time{} // a reconnection after Resume has a new window
	e.mu.Unlock()
	e.signal()
}

// Stop ends the sweep: the output is turned off, the session saved and
// Run returns nil with the state Stopped.
func (e *Engine) Stop() {
	e.mu.Lock()
	if !e.stopped {
		e.stopped = true
		close(e.quit)
	}
	if e.cancelStep != nil {
		e.cancelStep()
	}
	e.mu.Unlock()
	e.signal()
}

// Remeasure queues a new attempt at point i, ahead of the plan, with
// override's settings when it is not nil (its zero fields are filled by
// WithDefaults; it must Validate). Earlier attempts are kept.
func (e *Engine) Remeasure(i int, override *Settings) error {
	var ov *Settings
	if override != nil {
		s := copySettings(override.WithDefaults())
		if err := s.Validate(); err != nil {
			return fmt.Errorf("re-measure point %d: %w", i, err)
		}
		ov = &s
	}
	e.mu.Lock()
	defer e.mu.Unlock()
	if i < 0 || i >= len(e.sess.Points) {
		return fmt.Errorf("re-measure point %d: no such point (the session has %d)", i, len(e.sess.Points))
	}
	e.queue = append(e.queue, job{freq: e.sess.Points[i].FreqHz, override: ov, reason: "user"})
	e.signalLocked()
	return nil
}

// RemeasureFlagged queues every flagged point for a new attempt and
// returns how many were queued.
func (e *Engine) RemeasureFlagged(override *Settings) (int, error) {
	var ov *Settings
	if override != nil {
		s := copySettings(override.WithDefaults())
		if err := s.Validate(); err != nil {
			return 0, fmt.Errorf("re-measure flagged points: %w", err)
		}
		ov = &s
	}
	e.mu.Lock()
	defer e.mu.Unlock()
	n := 0
	for _, p := range e.sess.Points {
		if p.Flagged {
			e.queue = append(e.queue, job{freq: p.FreqHz, override: ov, reason: "user: flagged"})
			n++
		}
	}
	if n > 0 {
		e.signalLocked()
	}
	return n, nil
}

func (e *Engine) signalLocked() {
	select {
	case e.wake <- struct{}{}:
	default:
	}
}

// UpdateSettings replaces the settings used from the next attempt on.
// Frequencies of the new plan that the session lacks are added as
// unmeasured points; measured points are never removed.
func (e *Engine) UpdateSettings(s Settings) error {
	s = copySettings(s.WithDefaults())
	if err := s.Validate(); err != nil {
		return err
	}
	e.mu.Lock()
	defer e.mu.Unlock()
	e.set = s
	e.sess.Settings = s
	for _, f := range s.Plan() {
		if e.findLocked(f) < 0 {
			e.insertLocked(Point{FreqHz: f, Chosen: -1})
		}
	}
	e.signalLocked()
	return nil
}

// SetChosen makes attempt a of point i the one that counts; a = −1
// returns to the default (best by uncertainty).
func (e *Engine) SetChosen(i, a int) error {
	e.mu.Lock()
	defer e.mu.Unlock()
	if i < 0 || i >= len(e.sess.Points) {
		return fmt.Errorf("choose attempt of point %d: no such point", i)
	}
	if a < -1 || a >= len(e.sess.Points[i].Attempts) {
		return fmt.Errorf("choose attempt %d of point %d: no such attempt", a, i)
	}
	e.sess.Points[i].Chosen = a
	return nil
}

// AddNote stamps a remark into the session.
func (e *Engine) AddNote(text string) {
	e.mu.Lock()
	e.sess.Notes = append(e.sess.Notes, Note{At: e.cfg.Now(), Text: text})
	e.mu.Unlock()
}

// Save writes the session file now (atomically); with no Out it does
// nothing.
func (e *Engine) Save() error {
	if e.cfg.Out == "" {
		return nil
	}
	e.saveMu.Lock()
	defer e.saveMu.Unlock()
	e.mu.Lock()
	e.sess.Updated = e.cfg.Now()
	s := copySession(e.sess)
	e.mu.Unlock()
	return SaveSession(e.cfg.Out, &s)
}

// Defaults returns the default settings (the package's Defaults).
func (e *Engine) Defaults() Settings { return Defaults() }

// findLocked returns the index of the point at f (relative match within
// 1e-9), or −1.
func (e *Engine) findLocked(f float64) int {
	for i, p := range e.sess.Points {
		if math.Abs(p.FreqHz-f) <= 1e-9*f {
			return i
		}
	}
	return -1
}

func (e *Engine) insertLocked(p Point) int {
	i := sort.Search(len(e.sess.Points), func(k int) bool { return e.sess.Points[k].FreqHz > p.FreqHz })
	e.sess.Points = append(e.sess.Points, Point{})
	copy(e.sess.Points[i+1:], e.sess.Points[i:])
	e.sess.Points[i] = p
	return i
}

func (e *Engine) emit(ev Event) {
	if e.cfg.Events == nil {
		return
	}
	select {
	case e.cfg.Events <- ev:
	case <-e.quit:
	}
}

func (e *Engine) setState(s State, msg string) {
	e.mu.Lock()
	changed := e.state != s
	e.state = s
	e.mu.Unlock()
	if changed {
		e.emit(StateChanged{State: s, Msg: msg})
	}
}

// String names the state.
func (s State) String() string {
	switch s {
	case Idle:
		return "idle"
	case Running:
		return "running"
	case Paused:
		return "paused"
	case Refining:
		return "refining"
	case Done:
		return "done"
	case Failed:
		return "failed"
	case Stopped:
		return "stopped"
	case Reconnecting:
		return "reconnecting"
	}
	return fmt.Sprintf("state(%d)", int(s))
}

// Run measures the session: setup (output off, error queue drained),
// every plan point, a neighbour check, then refinement near the
// crossovers. It returns nil when the sweep is done or stopped, ctx's
// error when ctx ends (the session is saved either way) and the
// instrument error that failed the sweep otherwise. The generator's
// output is off when Run returns, whatever the path. Run may be called
// once.
func (e *Engine) Run(ctx context.Context) (err error) {
	e.mu.Lock()
	if e.ran {
		e.mu.Unlock()
		return errors.New("sweep: Run called twice")
	}
	e.ran = true
	e.mu.Unlock()
	if e.cfg.Events != nil {
		defer close(e.cfg.Events)
	}
	defer func() {
		if r := recover(); r != nil {
			err = fmt.Errorf("sweep: internal error: %v", r)
			e.outputOff()
			e.setState(Failed, err.Error())
			e.emit(ErrorEvent{Err: err})
		}
	}()
	defer e.outputOff()

	e.setState(Running, "setup")
	if err := e.setup(ctx); err != nil {
		return e.fail(err)
	}
	for {
		if ctx.Err() != nil {
			e.outputOff()
			e.setState(Stopped, "interrupted")
			if serr := e.Save(); serr != nil {
				return fmt.Errorf("%w (and saving failed: %v)", ctx.Err(), serr)
			}
			return ctx.Err()
		}
		e.mu.Lock()
		stopped, paused := e.stopped, e.paused
		e.mu.Unlock()
		if stopped {
			e.outputOff()
			e.setState(Stopped, "stopped by the user")
			return e.Save()
		}
		if paused {
			e.outputOff()
			e.setState(Paused, "paused")
			if err := e.Save(); err != nil {
				e.emit(ErrorEvent{Err: err})
			}
			e.waitWake(ctx)
			continue
		}
		if e.fault != nil {
			if err := e.reconnect(ctx); err != nil {
				if errors.Is(err, errInterrupted) {
					continue // Pause, Stop or ctx: handled above
				}
				e.outputOff()
				if e.cfg.PauseOnError {
					// Resume tries again, for a new window.
					e.mu.Lock()
					e.paused = true
					e.mu.Unlock()
					e.emit(ErrorEvent{Err: err})
					continue
				}
				return e.fail(err)
			}
		}
		j, state, ok := e.nextJob()
		if !ok {
			e.outputOff()
			e.mu.Lock()
			e.sess.Complete = true
			e.mu.Unlock()
			if err := e.Save(); err != nil {
				return e.fail(err)
			}
			e.setState(Done, "sweep complete")
			if !e.cfg.Linger {
				return nil
			}
			e.waitWake(ctx)
			continue
		}
		e.setState(state, "")
		before := e.attemptsAt(j.freq)
		err := e.runJob(ctx, j)
		switch {
		case err == nil:
		case errors.Is(err, errInterrupted) || (ctx.Err() != nil && errors.Is(err, ctx.Err())):
			e.mu.Lock()
			e.queue = append([]job{j}, e.queue...)
			e.mu.Unlock()
		case e.cfg.Reconnect != nil && IsInstrumentFault(err):
			e.lost(j, before, err)
		default:
			e.outputOff()
			if e.cfg.PauseOnError {
				e.mu.Lock()
				e.paused = true
				e.queue = append([]job{j}, e.queue...)
				e.mu.Unlock()
				e.emit(ErrorEvent{Err: err})
				continue
			}
			return e.fail(err)
		}
	}
}

func (e *Engine) waitWake(ctx context.Context) {
	select {
	case <-e.wake:
	case <-ctx.Done():
	case <-e.quit:
	}
}

func (e *Engine) fail(err error) error {
	e.outputOff()
	if serr := e.Save(); serr != nil {
		err = fmt.Errorf("%w (and saving the session failed: %v)", err, serr)
	}
	e.setState(Failed, err.Error())
	e.emit(ErrorEvent{Err: err})
	return err
}

// outputOff turns the generator's output off with a fresh deadline, so it
// works after ctx has ended, and returns the generator's error.
func (e *Engine) outputOff() error {
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	err := e.cfg.Gen.SetOutput(ctx, false)
	if err == nil {
		e.outputOn = false
	}
	return err
}

func (e *Engine) setup(ctx context.Context) error {
	if err := e.cfg.Gen.SetOutput(ctx, false); err != nil {
		return fmt.Errorf("setup: turn the output off: %w", err)
	}
	e.outputOn = false
	return e.drainErrors(ctx, "setup")
}

func (e *Engine) drainErrors(ctx context.Context, when string) error {
	if d, ok := e.cfg.Gen.(ErrorDrainer); ok {
		if err := d.DrainErrors(ctx); err != nil {
			return fmt.Errorf("generator reported an error after %s: %w", when, err)
		}
	}
	if d, ok := e.cfg.Dig.(ErrorDrainer); ok {
		if err := d.DrainErrors(ctx); err != nil {
			return fmt.Errorf("digitizer reported an error after %s: %w", when, err)
		}
	}
	return nil
}
