package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"strings"
	"sync"
	"time"

	"loopsweep/instr"
	"loopsweep/sweep"
)

// defaultReconnectWindow is --reconnect-window's default.
const defaultReconnectWindow = sweep.DefaultReconnectWindow

// links holds the closers of the instrument links a bench uses now, so
// a reconnect can close the links that stopped answering and put the
// new ones in their place; bench.Close closes whatever is current.
type links struct {
	mu      sync.Mutex
	closers []func() error
}

func (l *links) swap(closers []func() error) []func() error {
	l.mu.Lock()
	defer l.mu.Unlock()
	old := l.closers
	l.closers = closers
	return old
}

// Close closes the current links in reverse order and forgets them.
func (l *links) Close() error {
	return closeAll(l.swap(nil))
}

func closeAll(closers []func() error) error {
	var first error
	for i := len(closers) - 1; i >= 0; i-- {
		if err := closers[i](); err != nil && first == nil {
			first = err
		}
	}
	return first
}

// relinker is the engine's Config.Reconnect for a bench opened by
// openBench: it opens both instruments again from the same addresses and
// profiles, exactly as the sweep began (openInstruments: connect,
// *IDN?, the profile's setup, the generator's output off and, where the
// profile checks them, the error queues cleared), checks that each
// answers with the identity it had at the start (after that setup,
// which openInstruments runs together with *IDN?: an instrument that
// is not the one the sweep began with is closed again with its output
// off, and the try fails), and puts the new
// generator behind the guard (Guard.Replace), so the exit path's off and
// the amplitude cap apply to it.
type relinker struct {
	b                      *bench
	genAddr, digAddr       string
	genProfile, digProfile string
	timeout                time.Duration
	guard                  *sweep.Guard
	want                   sweep.Instruments // the identities at the start
}

// Reconnect closes the current links first (an instrument that serves
// one client at a time can then take the new one, and no late reply on
// the old link can be read as an answer), then opens new ones. On any
// failure it closes what it opened; the engine tries again later.
func (r *relinker) Reconnect(ctx context.Context) (sweep.Generator, sweep.Digitizer, error) {
	r.b.links.Close()
	if err := ctx.Err(); err != nil {
		return nil, nil, err
	}
	nb := &bench{}
	if err := openInstruments(nb, r.genAddr, r.digAddr, r.genProfile, r.digProfile, r.timeout); err != nil {
		nb.Close()
		var ue *usageError
		if errors.As(err, &ue) {
			// openInstruments marks its errors as bad input (exit
			// status 2) and names the flag ("--gen ADDR: ...") for the
			// start of a sweep; here each is one failed try.
			err = errors.New(strings.TrimPrefix(ue.err.Error(), "--"))
		}
		return nil, nil, err
	}
	fail := func(err error) (sweep.Generator, sweep.Digitizer, error) {
		nb.Close()
		return nil, nil, err
	}
	if got, want := nb.info.GeneratorIDN, r.want.GeneratorIDN; got != want {
		return fail(fmt.Errorf("the generator at %s now identifies as %q, not %q as at the start", r.genAddr, got, want))
	}
	if got, want := nb.info.DigitizerIDN, r.want.DigitizerIDN; got != want {
		return fail(fmt.Errorf("the digitizer at %s now identifies as %q, not %q as at the start", r.digAddr, got, want))
	}
	if err := ctx.Err(); err != nil {
		return fail(err)
	}
	if err := r.guard.Replace(offFallback{nb.gen, r.genAddr, r.b.genProf, r.timeout}); err != nil {
		return fail(err)
	}
	r.b.links.swap(nb.closers)
	nb.closers = nil
	return r.guard, nb.dig, nil
}

// offFallback is a generator whose output off, when its own link fails
// with an instrument fault (sweep.IsInstrumentFault: no answer, link
// lost), is sent again over a new link (offOverFreshLink): an
// instrument busy with a query it will answer late, or whose socket has
// gone, does not execute an off queued behind it, and a generator keeps
// its output on when its link goes away. So the engine's off after a
// fault, and the guard's at exit, reach the instrument at once if it
// still takes commands at all.
type offFallback struct {
	sweep.Generator
	addr    string
	prof    *instr.Profile
	timeout time.Duration
}

// SetOutput forwards; an off that fails with an instrument fault is sent
// over a new link as well, and reported done when that link confirms it
// (or, with no output_query in the profile, accepted it).
func (g offFallback) SetOutput(ctx context.Context, on bool) error {
	err := g.Generator.SetOutput(ctx, on)
	if err == nil || on || !sweep.IsInstrumentFault(err) || g.addr == "" || g.prof == nil {
		return err
	}
	if ferr := offOverFreshLink(g.addr, g.prof, g.timeout); ferr != nil {
		return fmt.Errorf("%w; over a new link: %v", err, ferr)
	}
	return nil
}

// DrainErrors forwards to the wrapped generator's error queue, if it
// keeps one (sweep.ErrorDrainer).
func (g offFallback) DrainErrors(ctx context.Context) error {
	if d, ok := g.Generator.(sweep.ErrorDrainer); ok {
		return d.DrainErrors(ctx)
	}
	return nil
}

// reportReconnect prints the reconnection events of a headless sweep on
// w; other events are left to the caller. It reports whether ev was one
// of them.
func reportReconnect(w io.Writer, ev sweep.Event, nPoints func() int) bool {
	switch ev := ev.(type) {
	case sweep.InstrumentLost:
		fmt.Fprintf(w, "instrument fault at point %d/%d (%s Hz): %v\n", ev.Index+1, nPoints(), fmtSI(ev.FreqHz), ev.Err)
	case sweep.WaitingForInstruments:
		off, saved := "output off", "session saved"
		if ev.OffErr != nil {
			off = fmt.Sprintf("output off sent but not confirmed (%s): the output may still be on", oneLine(ev.OffErr))
		}
		if ev.SaveErr != nil {
			saved = fmt.Sprintf("session NOT saved (%s)", oneLine(ev.SaveErr))
		}
		fmt.Fprintf(w, "waiting for the instruments: %s, %s, reconnecting for up to %v (Ctrl-C stops)\n", off, saved, ev.Window)
	case sweep.ReconnectFailed:
		fmt.Fprintf(w, "reconnect try %d failed: %v; next try in %v\n", ev.Try, oneLine(ev.Err), roundWait(ev.Retry))
	case sweep.Reconnected:
		tries := "tries"
		if ev.Tries == 1 {
			tries = "try"
		}
		fmt.Fprintf(w, "reconnected after %v (%d %s): settings applied again, resuming at point %d/%d (%s Hz)\n",
			roundWait(ev.After), ev.Tries, tries, ev.Index+1, nPoints(), fmtSI(ev.FreqHz))
	default:
		return false
	}
	return true
}

// roundWait rounds a wait for a message: 10 ms below a second, 100 ms
// above.
func roundWait(d time.Duration) time.Duration {
	if d < time.Second {
		return d.Round(10 * time.Millisecond)
	}
	return d.Round(100 * time.Millisecond)
}

// oneLine keeps an error on one line of the progress log.
func oneLine(err error) string {
	return strings.Join(strings.Fields(err.Error()), " ")
}
