package main

import (
	"context"
	"errors"
	"net"
	"strings"
	"testing"
	"time"

	"loopsweep/instr"
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
