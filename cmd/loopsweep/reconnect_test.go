package main

import (
	"context"
	"errors"
	"net"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"loopsweep/instr"
	"loopsweep/sim"
	"loopsweep/sweep"
)

// openTestBench opens the simulated bench's instruments as openBench
// does (the links kept apart for a reconnect) and puts the generator
// behind a guard.
func openTestBench(t *testing.T, addrGen, addrDig string) (*bench, *sweep.Guard) {
	t.Helper()
	b := &bench{}
	if err := openInstruments(b, addrGen, addrDig, "", "", time.Second); err != nil {
		t.Fatal(err)
	}
	b.links.swap(b.closers)
	b.closers = []func() error{b.links.Close}
	t.Cleanup(func() { b.Close() })
	g, err := sweep.NewGuard(offFallback{b.gen, b.genAddr, b.genProf, time.Second}, 1, nil)
	if err != nil {
		t.Fatal(err)
	}
	return b, g
}

// TestRelinker: a reconnection closes the old links, opens new ones
// that work, keeps the guard (its cap and its exit-path off apply to the
// new generator) and turns the output off; an instrument that answers
// with another identity than at the start is refused and closed, with
// its output off.
func TestRelinker(t *testing.T) {
	srv := startBench(t)
	ctx := context.Background()
	b, guard := openTestBench(t, srv.GenAddr(), srv.DigAddr())
	oldGen := b.gen
	rl := &relinker{b: b, genAddr: srv.GenAddr(), digAddr: srv.DigAddr(), timeout: time.Second, guard: guard, want: b.info}
	if err := guard.SetAmplitude(ctx, 0.1); err != nil {
		t.Fatal(err)
	}
	if err := guard.SetOutput(ctx, true); err != nil || !srv.OutputOn() {
		t.Fatalf("output on before the reconnect: %v (sim %v)", err, srv.OutputOn())
	}

	gen, dig, err := rl.Reconnect(ctx)
	if err != nil {
		t.Fatalf("Reconnect: %v", err)
	}
	if gen != sweep.Generator(guard) {
		t.Errorf("Reconnect returned %T, want the same guard", gen)
	}
	if srv.OutputOn() {
		t.Error("output on after the reconnect: the new generator driver must turn it off")
	}
	// The old link is closed; the new ones work.
	if err := oldGen.SetFrequency(ctx, 1000); !errors.Is(err, net.ErrClosed) {
		t.Errorf("old generator link: %v, want it closed", err)
	}
	if err := gen.SetFrequency(ctx, 1000); err != nil {
		t.Errorf("new generator: %v", err)
	}
	if _, err := dig.Configure(ctx, instr.CaptureSettings{Points: 100, IntervalS: 1e-5,
		Channels: [2]instr.ChannelSettings{{RangeV: 1}, {RangeV: 1}}}); err != nil {
		t.Errorf("new digitizer: %v", err)
	}
	// The guard forgot the old amplitude: no output before a new one.
	if err := guard.SetOutput(ctx, true); !errors.Is(err, sweep.ErrNoAmplitude) {
		t.Errorf("output on right after the reconnect: %v, want ErrNoAmplitude", err)
	}
	if err := guard.SetAmplitude(ctx, 2); !errors.Is(err, sweep.ErrAboveCap) {
		t.Errorf("2 Vpp through the guard after the reconnect: %v, want the 1 Vpp cap", err)
	}

	// Another instrument at the generator's address.
	if err := guard.SetAmplitude(ctx, 0.1); err != nil {
		t.Fatal(err)
	}
	if err := guard.SetOutput(ctx, true); err != nil {
		t.Fatal(err)
	}
	rl.want.GeneratorIDN = "Someone Else,Other Generator,0,0"
	if _, _, err := rl.Reconnect(ctx); err == nil || !strings.Contains(err.Error(), "now identifies as") || !strings.Contains(err.Error(), rl.want.GeneratorIDN) {
		t.Errorf("Reconnect to another instrument: %v, want it refused naming both identities", err)
	}
	if srv.OutputOn() {
		t.Error("output on after a refused reconnect")
	}
}

// TestOffFallbackSendsOverNewLink: when the generator's own link is gone
// (the simulator dropped it; a generator keeps its output on then), an
// output off is sent over a new link and reported done.
func TestOffFallbackSendsOverNewLink(t *testing.T) {
	srv := startBench(t)
	ctx := context.Background()
	b, guard := openTestBench(t, srv.GenAddr(), srv.DigAddr())
	if err := guard.SetAmplitude(ctx, 0.1); err != nil {
		t.Fatal(err)
	}
	if err := guard.SetOutput(ctx, true); err != nil {
		t.Fatal(err)
	}
	srv.DropConnections()
	// Without the fallback the off fails on the dead link.
	if err := b.gen.SetOutput(ctx, false); err == nil || !sweep.IsInstrumentFault(err) {
		t.Fatalf("off over the dropped link: %v, want an instrument fault", err)
	}
	if !srv.OutputOn() {
		t.Fatal("output off after the drop: the test would prove nothing")
	}
	if err := guard.Off(); err != nil {
		t.Errorf("guard off with the fallback: %v", err)
	}
	if srv.OutputOn() {
		t.Error("output still on: the fallback did not reach the generator")
	}
}

// TestReconnectInProcess wires the engine as runSweep does (guard,
// relinker, safety) against the simulated bench in this process, so the
// race detector sees the reconnection: the bench stops answering at
// point 3 and answers again after the first failed try; the sweep
// completes with every point measured once.
func TestReconnectInProcess(t *testing.T) {
	srv := startBench(t)
	b, guard := openTestBench(t, srv.GenAddr(), srv.DigAddr())
	rl := &relinker{b: b, genAddr: srv.GenAddr(), digAddr: srv.DigAddr(), timeout: 300 * time.Millisecond, guard: guard, want: b.info}
	set := sweep.Defaults()
	set.StartHz, set.StopHz, set.PerDecade, set.RefineBudget = 1e3, 1e4, 10, 0
	set.SettleMin = 30 * time.Millisecond
	set.MaxAmpVpp, set.AmpVpp = 1, 0.1
	events := make(chan sweep.Event, 64)
	eng, err := sweep.New(sweep.Config{Settings: set, Gen: guard, Dig: b.dig, Out: filepath.Join(t.TempDir(), "s.json"),
		ACCoupling: b.ac, FixedOffset: b.fixedOff, MaxPoints: b.maxPoints, Events: events,
		Reconnect: rl.Reconnect, ReconnectWindow: time.Minute})
	if err != nil {
		t.Fatal(err)
	}
	saf := newSafety(offWithFallback(guard.Shutdown, srv.GenAddr(), b.genProf, time.Second), eng.Save)
	defer saf.Done()
	runErr := make(chan error, 1)
	saf.Go(func() { runErr <- eng.Run(saf.Context()) })
	measured := map[int]int{}
	injected, lost, back := false, false, false
	for ev := range events {
		switch ev := ev.(type) {
		case sweep.PointStarted:
			if ev.Index == 2 && !injected {
				srv.SetFaults(sim.Faults{ReplyDelay: time.Second})
				injected = true
			}
		case sweep.PointMeasured:
			measured[ev.Index]++
		case sweep.InstrumentLost:
			lost = true
		case sweep.WaitingForInstruments:
			// The simulator executes the off though it answers nothing.
			if srv.OutputOn() {
				t.Error("output on while waiting for the instruments")
			}
		case sweep.ReconnectFailed:
			srv.SetFaults(sim.Faults{})
		case sweep.Reconnected:
			back = true
		}
	}
	if err := <-runErr; err != nil {
		t.Fatalf("Run: %v", err)
	}
	if !lost || !back {
		t.Fatalf("fault reported %v, reconnected %v", lost, back)
	}
	s := eng.Snapshot()
	for i, p := range s.Points {
		if len(p.Attempts) != 1 || measured[i] != 1 {
			t.Errorf("point %d: %d attempts, %d PointMeasured; want 1 and 1", i+1, len(p.Attempts), measured[i])
		}
	}
	if srv.OutputOn() {
		t.Error("output on after the sweep")
	}
}

// TestReconnectWindowFlag: a negative or malformed window is bad input
// (exit status 2) naming the flag, before any instrument is opened.
func TestReconnectWindowFlag(t *testing.T) {
	for _, c := range []struct{ val, want string }{
		{"-1s", "--reconnect-window -1s: want a duration of 0 or more"},
		{"2 minutes", "reconnect-window"},
	} {
		var out, errb strings.Builder
		code := run([]string{"sweep", "--sim", "--headless", "--out", filepath.Join(t.TempDir(), "s.json"), "--reconnect-window", c.val}, &out, &errb)
		if code != 2 || !strings.Contains(errb.String(), c.want) {
			t.Errorf("--reconnect-window %q: exit %d, stderr %q; want 2 and %q", c.val, code, errb.String(), c.want)
		}
	}
}
