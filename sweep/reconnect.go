package sweep

import (
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"net"
	"os"
	"syscall"
	"time"

	"loopsweep/instr"
)

// Reconnection defaults (Config.ReconnectWindow, Config.ReconnectBackoff).
// Two minutes is long enough to re-seat a cable or power-cycle an
// instrument, short enough that an unattended sweep does not wait for
// nothing; the backoff doubles from a quarter second so a link that
// drops for a moment costs little, and stops at 5 s so a returning
// instrument is found soon. Engineering choices, not outside facts.
const (
	DefaultReconnectWindow  = 2 * time.Minute
	DefaultReconnectBackoff = 250 * time.Millisecond
	MaxReconnectBackoff     = 5 * time.Second
)

// IsInstrumentFault reports whether err means an instrument stopped
// answering rather than answered wrongly: a timeout (instr.ErrTimeout,
// a deadline expiring on the link) or a lost link (closed by the
// instrument, reset, refused, unreachable, a device gone). These are
// what reconnecting can cure; an error the instrument reported, a
// malformed reply or a cancelled context are not.
func IsInstrumentFault(err error) bool {
	if err == nil || errors.Is(err, context.Canceled) || errors.Is(err, context.DeadlineExceeded) {
		return false
	}
	if errors.Is(err, instr.ErrTimeout) || errors.Is(err, os.ErrDeadlineExceeded) {
		return true
	}
	for _, target := range []error{
		io.EOF, io.ErrUnexpectedEOF, net.ErrClosed, os.ErrClosed,
		syscall.ECONNRESET, syscall.ECONNREFUSED, syscall.ECONNABORTED, syscall.EPIPE,
		syscall.ENETUNREACH, syscall.EHOSTUNREACH, syscall.ETIMEDOUT,
		syscall.EIO, syscall.ENODEV, syscall.ENXIO,
	} {
		if errors.Is(err, target) {
			return true
		}
	}
	var oe *net.OpError
	return errors.As(err, &oe)
}

// attemptsAt counts the attempts of the point at f (0 when there is no
// such point yet).
func (e *Engine) attemptsAt(f float64) int {
	e.mu.Lock()
	defer e.mu.Unlock()
	if i := e.findLocked(f); i >= 0 {
		return len(e.sess.Points[i].Attempts)
	}
	return 0
}

// lost handles an instrument fault that ended job j (whose point had
// before attempts when it began): the fault is published at once, the
// output goes off (best effort: the link may be dead, and over a dead
// link the off itself may take a timeout), what j still has to do goes
// back to the front of the queue, the session is saved, and Run
// reconnects before the next job. The failed attempt was never recorded
// (runJob records an attempt only once it is measured), so nothing
// half-measured reaches the file.
func (e *Engine) lost(j job, before int, err error) {
	e.mu.Lock()
	idx := e.findLocked(j.freq)
	e.mu.Unlock()
	e.emit(InstrumentLost{Index: idx, FreqHz: j.freq, Err: err, Window: e.cfg.ReconnectWindow})
	offErr := e.outputOff()
	e.mu.Lock()
	idx = e.findLocked(j.freq)
	if rest, ok := e.restOfJobLocked(j, before, idx); ok {
		e.queue = append([]job{rest}, e.queue...)
	}
	if e.totalAttemptsLocked() != e.attemptsAtReconnect {
		// Progress since the last reconnection (or none yet): a new
		// window. Otherwise the instruments came back but failed again
		// before measuring anything, and the window goes on, so a bench
		// that connects but never measures cannot hold the sweep forever.
		e.windowStart = time.Time{}
	}
	left := e.cfg.ReconnectWindow
	if !e.windowStart.IsZero() {
		left = max(0, e.windowStart.Add(left).Sub(e.cfg.Now()))
	}
	e.mu.Unlock()
	e.fault, e.faultAt, e.faultFreq = err, e.cfg.Now(), j.freq
	e.unsaved = false
	serr := e.Save()
	if serr != nil {
		serr = fmt.Errorf("save session: %w", serr)
		e.emit(ErrorEvent{Err: serr})
	}
	e.emit(WaitingForInstruments{OffErr: offErr, SaveErr: serr, Window: left})
}

// restOfJobLocked is what job j still has to do after a fault, given
// that its point (index idx) had before attempts when it began: all of
// it when it recorded none; nothing when its last recorded attempt
// passed or used up its attempts (the fault hit the error-queue check
// after the point, which is then complete); otherwise the attempts left,
// as the retry runJob would have made, with at least twice the last
// attempt's cycles.
func (e *Engine) restOfJobLocked(j job, before, idx int) (job, bool) {
	if idx < 0 {
		return j, true
	}
	p := e.sess.Points[idx]
	made := len(p.Attempts) - before
	if made <= 0 {
		return j, true
	}
	set := e.set
	if j.override != nil {
		set = *j.override
	}
	maxA := j.attempts
	if maxA <= 0 {
		maxA = set.MaxAttempts
	}
	last := p.Attempts[len(p.Attempts)-1]
	if last.Problem == "" || made >= maxA {
		return job{}, false
	}
	r := j
	r.insert = false
	r.attempts = maxA - made
	if j.reason != "refine" && j.reason != "neighbours" {
		r.reason = "retry: " + last.Problem
	}
	if set.Cycles > 0 {
		r.cyclesX = max(r.cyclesX, 1, int(math.Ceil(2*last.Cycles/float64(set.Cycles))))
	}
	return r, true
}

func (e *Engine) totalAttemptsLocked() int {
	n := 0
	for _, p := range e.sess.Points {
		n += len(p.Attempts)
	}
	return n
}

// beginStep registers a cancellable step under ctx for Pause and Stop to
// cut short; ok is false when one of them came first.
func (e *Engine) beginStep(ctx context.Context) (step context.Context, end func(), ok bool) {
	e.mu.Lock()
	defer e.mu.Unlock()
	if e.paused || e.stopped {
		return nil, nil, false
	}
	step, cancel := context.WithCancel(ctx)
	e.cancelStep = cancel
	return step, func() {
		cancel()
		e.mu.Lock()
		e.cancelStep = nil
		e.mu.Unlock()
	}, true
}

// reconnect recovers from e.fault: it calls Config.Reconnect until a try
// succeeds, waiting ReconnectBackoff after the first failure and twice
// as long after each further one (at most MaxReconnectBackoff), for at
// most ReconnectWindow from the window's start: now, or the fault before
// this one when no attempt was measured in between. Pause, Stop and ctx interrupt it
// (errInterrupted; the fault stays, so Resume starts a new window).
// After the window it returns an error naming the fault, the tries and
// the last try's error. On success the engine forgets what it believed
// the instruments were set to, so the next attempt sets the amplitude,
// the frequency, then the output, and configures the digitizer afresh.
func (e *Engine) reconnect(ctx context.Context) error {
	window := e.cfg.ReconnectWindow
	now := e.cfg.Now()
	e.mu.Lock()
	if e.windowStart.IsZero() {
		e.windowStart = now
	}
	deadline := e.windowStart.Add(window)
	e.mu.Unlock()
	if !now.Before(deadline) {
		return fmt.Errorf("gave up reconnecting after %v: the instruments answered again but failed again before any attempt was measured: %w", window, e.fault)
	}
	e.setState(Reconnecting, fmt.Sprintf("%v; reconnecting for up to %v", e.fault, deadline.Sub(now).Round(time.Second)))
	wait := e.cfg.ReconnectBackoff
	for try := 1; ; try++ {
		step, end, ok := e.beginStep(ctx)
		if !ok {
			return errInterrupted
		}
		gen, dig, err := e.cfg.Reconnect(step)
		if err == nil && (gen == nil || dig == nil) {
			err = errors.New("sweep: Reconnect returned no generator or digitizer")
		}
		if err == nil {
			end()
			e.cfg.Gen, e.cfg.Dig = gen, dig
			e.forgetInstruments()
			e.mu.Lock()
			idx := e.findLocked(e.faultFreq)
			e.attemptsAtReconnect = e.totalAttemptsLocked()
			e.mu.Unlock()
			e.emit(Reconnected{Tries: try, After: e.cfg.Now().Sub(e.faultAt), Index: idx, FreqHz: e.faultFreq})
			e.fault = nil
			return nil
		}
		if ctx.Err() != nil || e.interrupted() {
			end()
			return errInterrupted
		}
		now := e.cfg.Now()
		if !now.Before(deadline) {
			end()
			return fmt.Errorf("gave up reconnecting after %v (%d tries, the last: %v): %w", window, try, err, e.fault)
		}
		d := min(wait, deadline.Sub(now))
		wait = min(2*wait, MaxReconnectBackoff)
		e.emit(ReconnectFailed{Try: try, Err: err, Retry: d})
		serr := e.cfg.Sleep(step, d)
		end()
		if serr != nil {
			if ctx.Err() != nil || e.interrupted() || errors.Is(serr, context.Canceled) {
				return errInterrupted
			}
			return fmt.Errorf("reconnect: wait %v: %w", d, serr)
		}
	}
}

// forgetInstruments drops what the engine believed about the
// instruments' settings: after a reconnect the generator's output is off
// and both may have been reset. The input windows learned from readings
// (the bench, not the instruments) are kept.
func (e *Engine) forgetInstruments() {
	e.outputOn = false
	e.freqNow, e.ampNow = 0, 0
	e.haveGot = false
	e.lastWant, e.lastGot = instr.CaptureSettings{}, instr.CaptureSettings{}
}
