package sweep

import (
	"context"
	"errors"
	"fmt"
	"math"
	"sync"
	"time"
)

// Sentinel errors of Guard, for errors.Is.
var (
	// ErrAboveCap: an amplitude above the guard's cap was refused and
	// not sent to the generator.
	ErrAboveCap = errors.New("amplitude above the cap")
	// ErrNoAmplitude: the output was to be enabled before any amplitude
	// had been set, so the generator would have injected whatever level
	// it was left at.
	ErrNoAmplitude = errors.New("output enabled before the amplitude was set")
	// ErrShutdown: the guard was shut down (Shutdown); the output stays
	// off and no amplitude is sent any more. The errors carrying it also
	// wrap context.Canceled, so an engine whose context was cancelled for
	// the same exit treats them as the interruption they are.
	ErrShutdown = errors.New("generator shut down for exit")
)

// Guard ramp parameters: with the output on, a step up of more than
// GuardRampRatio times is sent as a ramp of steps of at most that ratio,
// each held GuardRampDwell. Steps down are sent at once (they only
// reduce the injection). The factor 2 (6 dB) per step is common practice
// for a gentle disturbance, not a standard.
const (
	GuardRampRatio = 2.0
	GuardRampDwell = 2 * time.Millisecond
	// GuardOffTimeout bounds the fresh context Off uses.
	GuardOffTimeout = 2 * time.Second
)

// Guard wraps a Generator and enforces the safety rules whatever the
// caller does:
//
//   - an amplitude above the cap (or not a positive finite number) is
//     refused with an error wrapping ErrAboveCap and never forwarded;
//   - the output may only be enabled after an amplitude has been set;
//   - with the output on, a step up of more than GuardRampRatio is ramped
//     in steps of at most that ratio, each held GuardRampDwell (through
//     the injected sleep);
//   - Off turns the output off with its own short deadline, so it works
//     after the caller's context has ended, and may be called any number
//     of times.
//
// Guard is safe for concurrent use; calls are serialised.
type Guard struct {
	g     Generator
	capV  float64
	sleep func(time.Duration)

	mu     sync.Mutex
	on     bool    // the output as last commanded successfully
	ampV   float64 // the amplitude last accepted by the generator; 0: none yet
	failed bool    // an output command failed: the state is unknown, assume on
	down   bool    // Shutdown was called: refuse everything but off
}

var _ Generator = (*Guard)(nil)

// NewGuard wraps g with a hard cap of capVpp volts peak-to-peak. sleep
// waits between ramp steps; nil means time.Sleep.
func NewGuard(g Generator, capVpp float64, sleep func(time.Duration)) (*Guard, error) {
	if g == nil {
		return nil, errors.New("guard: a generator is required")
	}
	if !(capVpp > 0) || math.IsInf(capVpp, 0) {
		return nil, fmt.Errorf("guard: cap %g Vpp: want a positive finite amplitude", capVpp)
	}
	if sleep == nil {
		sleep = time.Sleep
	}
	return &Guard{g: g, capV: capVpp, sleep: sleep}, nil
}

// Cap returns the guard's amplitude cap, Vpp.
func (gd *Guard) Cap() float64 { return gd.capV }

// OutputOn reports whether the output may be on: true after a successful
// SetOutput(true), and after any output command that failed (the state
// is then unknown) until an Off or SetOutput(false) succeeds.
func (gd *Guard) OutputOn() bool {
	gd.mu.Lock()
	defer gd.mu.Unlock()
	return gd.on || gd.failed
}

// SetFrequency forwards the frequency.
func (gd *Guard) SetFrequency(ctx context.Context, hz float64) error {
	gd.mu.Lock()
	defer gd.mu.Unlock()
	return gd.g.SetFrequency(ctx, hz)
}

// SetAmplitude checks vpp against the cap and forwards it, ramped when
// the output is on and the step up is large.
func (gd *Guard) SetAmplitude(ctx context.Context, vpp float64) error {
	if !(vpp > 0) || math.IsInf(vpp, 0) {
		return fmt.Errorf("guard: amplitude %g Vpp: want a positive finite amplitude: %w", vpp, ErrAboveCap)
	}
	if vpp > gd.capV {
		return fmt.Errorf("guard: amplitude %g Vpp refused, the cap is %g Vpp: %w", vpp, gd.capV, ErrAboveCap)
	}
	gd.mu.Lock()
	defer gd.mu.Unlock()
	if gd.down {
		return fmt.Errorf("guard: amplitude %g Vpp: %w (%w)", vpp, ErrShutdown, context.Canceled)
	}
	if (gd.on || gd.failed) && gd.ampV > 0 {
		for a := gd.ampV * GuardRampRatio; a < vpp; a *= GuardRampRatio {
			if err := ctx.Err(); err != nil {
				return fmt.Errorf("guard: ramp to %g Vpp: %w", vpp, err)
			}
			if err := gd.g.SetAmplitude(ctx, a); err != nil {
				return fmt.Errorf("guard: ramp step %g Vpp: %w", a, err)
			}
			gd.ampV = a
			gd.sleep(GuardRampDwell)
		}
	}
	// On failure the level is the old one or vpp; keeping the old (the
	// lower, for a step up) makes the next step up ramp from it.
	if err := gd.g.SetAmplitude(ctx, vpp); err != nil {
		return err
	}
	gd.ampV = vpp
	return nil
}

// SetOutput enables or disables the output. Enabling before an
// amplitude has been accepted is refused with ErrNoAmplitude.
func (gd *Guard) SetOutput(ctx context.Context, on bool) error {
	gd.mu.Lock()
	defer gd.mu.Unlock()
	if on && gd.down {
		return fmt.Errorf("guard: turn the output on: %w (%w)", ErrShutdown, context.Canceled)
	}
	if on && !(gd.ampV > 0) {
		return fmt.Errorf("guard: turn the output on: %w", ErrNoAmplitude)
	}
	return gd.setOutputLocked(ctx, on)
}

func (gd *Guard) setOutputLocked(ctx context.Context, on bool) error {
	if err := gd.g.SetOutput(ctx, on); err != nil {
		gd.failed = true
		return err
	}
	gd.on, gd.failed = on, false
	return nil
}

// Off turns the output off with a fresh context of GuardOffTimeout, so
// it works after the caller's context has been cancelled. It always
// sends the command (the instrument's state may have changed behind the
// guard's back, e.g. after a reconnect), and may be called repeatedly.
func (gd *Guard) Off() error {
	ctx, cancel := context.WithTimeout(context.Background(), GuardOffTimeout)
	defer cancel()
	gd.mu.Lock()
	defer gd.mu.Unlock()
	if err := gd.setOutputLocked(ctx, false); err != nil {
		return fmt.Errorf("guard: turn the output off: %w", err)
	}
	return nil
}

// Shutdown latches the guard shut and turns the output off (as Off):
// from then on SetAmplitude and SetOutput(true) fail with ErrShutdown,
// so a sweep goroutine still running while the process exits cannot turn
// the output back on. Calling it again only repeats the off.
func (gd *Guard) Shutdown() error {
	gd.mu.Lock()
	gd.down = true
	gd.mu.Unlock()
	return gd.Off()
}

// Replace puts g behind the guard in place of the generator it wrapped,
// after a reconnect: g must come with its output off (a generator
// driver turns it off when it connects). The guard forgets the old
// amplitude, so the output cannot be enabled on g before an amplitude
// has been set on it, and the first step is not ramped from a level g
// never had. A guard that was shut down stays shut down. Whoever holds
// the guard (the engine, the exit path's Off) reaches g from then on.
func (gd *Guard) Replace(g Generator) error {
	if g == nil {
		return errors.New("guard: replace: a generator is required")
	}
	gd.mu.Lock()
	defer gd.mu.Unlock()
	gd.g = g
	gd.on, gd.failed, gd.ampV = false, false, 0
	return nil
}

// DrainErrors forwards to the wrapped generator's error queue when it
// keeps one (see ErrorDrainer), so wrapping a generator does not hide
// its instrument errors from the engine; otherwise it returns nil.
func (gd *Guard) DrainErrors(ctx context.Context) error {
	d, ok := gd.g.(ErrorDrainer)
	if !ok {
		return nil
	}
	gd.mu.Lock()
	defer gd.mu.Unlock()
	return d.DrainErrors(ctx)
}
