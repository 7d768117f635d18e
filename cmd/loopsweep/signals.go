package main

import (
	"context"
	"fmt"
	"io"
	"os"
	"os/signal"
	"runtime/debug"
	"sync"
	"syscall"
	"time"

	"loopsweep/instr"
)

// safetySignals are the signals that end a sweep: Ctrl-C, a kill from a
// supervisor, and a dropped SSH connection.
var safetySignals = []os.Signal{os.Interrupt, syscall.SIGTERM, syscall.SIGHUP}

// safetyGrace is how long the program may take, after a first signal, to
// return through Done on its own before the safety exits for it.
const safetyGrace = 3 * time.Second

// safety runs a cleanup (turn the generator's output off, save the
// session) exactly once, on whichever exit comes first:
//
//   - a normal return: defer s.Done();
//   - a panic in the goroutine that deferred Done, or in one started
//     with s.Go: the cleanup runs, the panic and its stack are printed on
//     stderr and the process exits with status 1;
//   - SIGINT, SIGTERM or SIGHUP: Context is cancelled and the cleanup
//     runs at once (the output goes off first), so the program can end
//     tidily; if it has not returned through Done within the grace
//     period, or on a second signal, the process exits with status
//     128+signal.
//
// A panic in a goroutine not started with s.Go still kills the process
// without the cleanup: start every goroutine that touches the
// instruments with s.Go.
type safety struct {
	off, save func() error

	grace  time.Duration
	exit   func(code int) // os.Exit; tests replace it
	stderr io.Writer

	once     sync.Once
	cleanErr error
	ctx      context.Context
	cancel   context.CancelFunc
	sigs     chan os.Signal
	done     chan struct{} // closed by Done
	doneOnce sync.Once
}

// newSafety installs the signal handlers; off and save may be nil.
func newSafety(off func() error, save func() error) *safety {
	ctx, cancel := context.WithCancel(context.Background())
	s := &safety{
		off: off, save: save,
		grace: safetyGrace, exit: os.Exit, stderr: os.Stderr,
		ctx: ctx, cancel: cancel,
		sigs: make(chan os.Signal, 2),
		done: make(chan struct{}),
	}
	signal.Notify(s.sigs, safetySignals...)
	go s.watch()
	return s
}

// Context is cancelled by the first signal (and by Done).
func (s *safety) Context() context.Context { return s.ctx }

// Cleanup runs the cleanup if it has not run yet and returns its error;
// later calls wait for the first to finish and return the same error.
func (s *safety) Cleanup() error {
	s.once.Do(func() {
		var errs []error
		if s.off != nil {
			if err := s.off(); err != nil {
				errs = append(errs, fmt.Errorf("turn the output off: %w", err))
			}
		}
		if s.save != nil {
			if err := s.save(); err != nil {
				errs = append(errs, fmt.Errorf("save the session: %w", err))
			}
		}
		for _, err := range errs {
			fmt.Fprintf(s.stderr, "loopsweep: cleanup: %v\n", err)
		}
		if len(errs) > 0 {
			s.cleanErr = errs[0]
		}
	})
	return s.cleanErr
}

// Go runs f in a new goroutine; a panic in f runs the cleanup, is
// reported on stderr and exits the process with status 1.
func (s *safety) Go(f func()) {
	go func() {
		defer func() {
			if r := recover(); r != nil {
				s.crash(r, debug.Stack())
			}
		}()
		f()
	}()
}

// Done runs the cleanup and removes the signal handlers. Deferred
// directly (defer s.Done()), it also catches a panic of the deferring
// goroutine: cleanup, report, exit status 1.
func (s *safety) Done() {
	if r := recover(); r != nil {
		s.crash(r, debug.Stack())
		return
	}
	s.Cleanup()
	s.stop()
}

func (s *safety) stop() {
	s.doneOnce.Do(func() {
		signal.Stop(s.sigs)
		close(s.done)
		s.cancel()
	})
}

func (s *safety) crash(r any, stack []byte) {
	s.Cleanup()
	fmt.Fprintf(s.stderr, "loopsweep: internal error (panic): %v\n\n%s", r, stack)
	s.stop()
	s.exit(1)
}

// watch waits for a signal: cleanup at once, cancel the context, then
// exit if the program does not return through Done in time or a second
// signal comes.
func (s *safety) watch() {
	var sig os.Signal
	select {
	case sig = <-s.sigs:
	case <-s.done:
		return
	}
	fmt.Fprintf(s.stderr, "loopsweep: %v: turning the output off and saving\n", sig)
	// Cancel first: a sweep then reads a refusal from a shut-down
	// generator (sweep.Guard.Shutdown) as the interruption it is.
	s.cancel()
	s.Cleanup()
	t := time.NewTimer(s.grace)
	defer t.Stop()
	select {
	case <-s.done:
		return
	case <-t.C:
	case sig = <-s.sigs:
	}
	s.exit(128 + signalNumber(sig))
}

func signalNumber(sig os.Signal) int {
	if n, ok := sig.(syscall.Signal); ok {
		return int(n)
	}
	return 1
}

// offOverFreshLink turns a generator's output off over a new connection
// to addr, for when the sweep's own link is lost: an instrument keeps
// its output on when its cable or socket goes away, so the old session
// cannot make the bench safe. It sends the profile's output_off command
// and, when the profile has an output_query, reads the state back and
// fails if the output is still on. Each exchange has the given timeout.
func offOverFreshLink(addr string, p *instr.Profile, timeout time.Duration) error {
	if p == nil || p.Generator == nil {
		return fmt.Errorf("turn the output off over a new link to %s: not a generator profile", addr)
	}
	c, err := instr.Open(addr, instr.Options{})
	if err != nil {
		return fmt.Errorf("turn the output off over a new link: %w", err)
	}
	defer c.Close()
	s := instr.NewSession(c, timeout)
	ctx, cancel := context.WithTimeout(context.Background(), 2*timeout)
	defer cancel()
	if err := s.Write(ctx, p.Generator.OutputOff); err != nil {
		return fmt.Errorf("turn the output off over a new link: %w", err)
	}
	if q := p.Generator.OutputQuery; q != "" {
		r, err := s.Query(ctx, q)
		if err != nil {
			return fmt.Errorf("read the output state over a new link: %w", err)
		}
		on, err := instr.ParseBool(r)
		if err != nil {
			return fmt.Errorf("read the output state over a new link: %s: %w", q, err)
		}
		if on {
			return fmt.Errorf("generator %s: the output is still ON after %q", addr, p.Generator.OutputOff)
		}
	}
	return nil
}

// offWithFallback returns an off function for safety: primary (the
// sweep's own generator, e.g. a sweep.Guard's Off), and when it fails,
// offOverFreshLink to addr. The error names both failures.
func offWithFallback(primary func() error, addr string, p *instr.Profile, timeout time.Duration) func() error {
	return func() error {
		err := primary()
		if err == nil {
			return nil
		}
		if ferr := offOverFreshLink(addr, p, timeout); ferr != nil {
			return fmt.Errorf("%w; over a new link: %v (the output may still be ON: switch it off at the instrument)", err, ferr)
		}
		return nil
	}
}
