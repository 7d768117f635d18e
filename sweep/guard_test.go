package sweep

import (
	"context"
	"errors"
	"fmt"
	"math"
	"testing"
	"time"

	"pgregory.net/rapid"
)

// recGen is a generator that records what it receives and checks the
// safety invariants on every call, independently of Guard's own logic:
// its view of the output and amplitude is built only from the commands
// that reached it.
type recGen struct {
	capV    float64
	on      bool
	amp     float64 // last amplitude received; 0: none
	maxSeen float64
	calls   []string
	fail    int // the next fail calls return an error
	bad     []string
}

func (r *recGen) failing() bool {
	if r.fail > 0 {
		r.fail--
		return true
	}
	return false
}

func (r *recGen) SetFrequency(ctx context.Context, hz float64) error {
	r.calls = append(r.calls, fmt.Sprintf("freq %g", hz))
	if r.failing() {
		return errors.New("recGen: injected failure")
	}
	return nil
}

func (r *recGen) SetAmplitude(ctx context.Context, vpp float64) error {
	r.calls = append(r.calls, fmt.Sprintf("amp %g", vpp))
	// Invariant 1: never above the cap, never a non-positive or NaN
	// level (the cap is the user's, the rule is issue 8's).
	if !(vpp > 0) || vpp > r.capV {
		r.bad = append(r.bad, fmt.Sprintf("amplitude %g Vpp reached the generator (cap %g)", vpp, r.capV))
	}
	// Invariant 3: with the output on, a step up is at most
	// GuardRampRatio (with a little room for the float product).
	if r.on && r.amp > 0 && vpp > r.amp*GuardRampRatio*(1+1e-12) {
		r.bad = append(r.bad, fmt.Sprintf("step %g -> %g Vpp with the output on (more than ×%g)", r.amp, vpp, GuardRampRatio))
	}
	if r.failing() {
		// The instrument may or may not have taken it: assume it did,
		// the worse case for the step check that follows.
		r.amp = math.Max(r.amp, vpp)
		r.maxSeen = math.Max(r.maxSeen, vpp)
		return errors.New("recGen: injected failure")
	}
	r.amp = vpp
	r.maxSeen = math.Max(r.maxSeen, vpp)
	return nil
}

func (r *recGen) SetOutput(ctx context.Context, on bool) error {
	r.calls = append(r.calls, fmt.Sprintf("output %v", on))
	// Invariant 2: the amplitude is set before the output is enabled.
	if on && !(r.amp > 0) {
		r.bad = append(r.bad, "output enabled before any amplitude was set")
	}
	if !on && ctx.Err() != nil {
		r.bad = append(r.bad, "output off sent with a context already ended")
	}
	if r.failing() {
		return errors.New("recGen: injected failure")
	}
	r.on = on
	return nil
}

func TestNewGuardRefusesBadCap(t *testing.T) {
	for _, c := range []float64{0, -1, math.NaN(), math.Inf(1)} {
		if _, err := NewGuard(&recGen{capV: 1}, c, nil); err == nil {
			t.Errorf("NewGuard cap %g: no error", c)
		}
	}
	if _, err := NewGuard(nil, 1, nil); err == nil {
		t.Error("NewGuard without a generator: no error")
	}
}

// TestGuardRules checks each rule once with hand-computed expectations.
func TestGuardRules(t *testing.T) {
	ctx := context.Background()
	r := &recGen{capV: 0.1}
	var slept []time.Duration
	g, err := NewGuard(r, 0.1, func(d time.Duration) { slept = append(slept, d) })
	if err != nil {
		t.Fatal(err)
	}
	if err := g.SetOutput(ctx, true); !errors.Is(err, ErrNoAmplitude) {
		t.Fatalf("output on before amplitude: err = %v, want ErrNoAmplitude", err)
	}
	if err := g.SetAmplitude(ctx, 0.2); !errors.Is(err, ErrAboveCap) {
		t.Fatalf("0.2 Vpp over a 0.1 Vpp cap: err = %v, want ErrAboveCap", err)
	}
	if len(r.calls) != 0 {
		t.Fatalf("refused commands reached the generator: %q", r.calls)
	}
	must := func(err error) {
		t.Helper()
		if err != nil {
			t.Fatal(err)
		}
	}
	must(g.SetAmplitude(ctx, 0.01))
	must(g.SetOutput(ctx, true))
	// 10 mV -> 100 mV with the output on: doublings 20, 40, 80 mV, then
	// 100 mV (each ≤ ×2), three dwells.
	must(g.SetAmplitude(ctx, 0.1))
	want := []string{"amp 0.01", "output true", "amp 0.02", "amp 0.04", "amp 0.08", "amp 0.1"}
	if fmt.Sprint(r.calls) != fmt.Sprint(want) {
		t.Errorf("calls %q, want %q", r.calls, want)
	}
	if len(slept) != 3 || slept[0] != GuardRampDwell {
		t.Errorf("slept %v, want 3 × %v", slept, GuardRampDwell)
	}
	// A step down goes at once.
	r.calls = nil
	must(g.SetAmplitude(ctx, 0.001))
	if fmt.Sprint(r.calls) != "[amp 0.001]" {
		t.Errorf("step down sent %q", r.calls)
	}
	// Off with a cancelled caller context still works, twice.
	cctx, cancel := context.WithCancel(ctx)
	cancel()
	_ = cctx
	must(g.Off())
	must(g.Off())
	if r.on || g.OutputOn() {
		t.Error("output still on after Off")
	}
	if len(r.bad) > 0 {
		t.Errorf("invariants broken: %q", r.bad)
	}
}

// amplitudeDraw draws an amplitude a caller might ask for: mostly
// sensible, sometimes above the cap by a little or a lot, sometimes
// garbage (zero, negative, NaN, Inf).
func amplitudeDraw(capV float64) *rapid.Generator[float64] {
	return rapid.Custom(func(t *rapid.T) float64 {
		switch rapid.IntRange(0, 9).Draw(t, "kind") {
		case 0:
			return capV * rapid.Float64Range(1, 1e3).Draw(t, "over")
		case 1:
			return rapid.SampledFrom([]float64{0, -capV, math.NaN(), math.Inf(1), math.Inf(-1), math.Nextafter(capV, 2*capV)}).Draw(t, "odd")
		default:
			return capV * math.Pow(10, rapid.Float64Range(-4, 0).Draw(t, "decades"))
		}
	})
}

// TestGuardPropertyRandomCallers drives the guard with random command
// sequences — plans stepped with a fixed level, amplitude profiles
// interpolated in log frequency (breakpoints above the cap allowed),
// automatic level control as a multiplicative random walk with no clamp,
// raw amplitude requests, output toggles, Off, and injected instrument
// failures — and checks, from what the generator received, that no
// amplitude ever exceeded the cap, the output was never enabled before
// an amplitude, and steps up with the output on never exceeded ×2.
func TestGuardPropertyRandomCallers(t *testing.T) {
	rapid.Check(t, func(t *rapid.T) {
		capV := math.Pow(10, rapid.Float64Range(-3, 1).Draw(t, "log10cap"))
		r := &recGen{capV: capV}
		g, err := NewGuard(r, capV, func(time.Duration) {})
		if err != nil {
			t.Fatal(err)
		}
		ctx := context.Background()
		steps := rapid.IntRange(1, 60).Draw(t, "steps")
		for i := 0; i < steps; i++ {
			r.fail = rapid.IntRange(0, 1).Draw(t, "fail") * rapid.IntRange(0, 2).Draw(t, "failN")
			switch rapid.IntRange(0, 5).Draw(t, "op") {
			case 0: // one raw request
				_ = g.SetAmplitude(ctx, amplitudeDraw(capV).Draw(t, "amp"))
			case 1: // output on or off
				_ = g.SetOutput(ctx, rapid.Bool().Draw(t, "on"))
			case 2: // Off, maybe with the caller's context gone
				_ = g.Off()
			case 3: // a plan at a fixed level
				f0 := rapid.Float64Range(1, 1e4).Draw(t, "f0")
				n := rapid.IntRange(1, 20).Draw(t, "n")
				a := amplitudeDraw(capV).Draw(t, "fixed")
				for k := 0; k < n; k++ {
					_ = g.SetAmplitude(ctx, a)
					_ = g.SetFrequency(ctx, f0*math.Pow(10, float64(k)/10))
					if k == 0 {
						_ = g.SetOutput(ctx, true)
					}
				}
			case 4: // an amplitude profile, log-interpolated
				lo := amplitudeDraw(capV).Draw(t, "lo")
				hi := amplitudeDraw(capV).Draw(t, "hi")
				n := rapid.IntRange(2, 30).Draw(t, "n")
				for k := 0; k < n; k++ {
					x := float64(k) / float64(n-1)
					a := math.Exp(math.Log(math.Abs(lo)+1e-12)*(1-x) + math.Log(math.Abs(hi)+1e-12)*x)
					_ = g.SetAmplitude(ctx, a)
					if k == 0 {
						_ = g.SetOutput(ctx, true)
					}
				}
			case 5: // automatic level: multiply by 0.5..8 per point, no clamp
				a := capV * math.Pow(10, rapid.Float64Range(-3, 0).Draw(t, "a0"))
				n := rapid.IntRange(1, 30).Draw(t, "n")
				for k := 0; k < n; k++ {
					a *= rapid.Float64Range(0.5, 8).Draw(t, "factor")
					_ = g.SetAmplitude(ctx, a)
					_ = g.SetOutput(ctx, true)
				}
			}
		}
		r.fail = 0
		if err := g.Off(); err != nil {
			t.Fatalf("final Off: %v", err)
		}
		if r.on || g.OutputOn() {
			t.Fatalf("output on after Off")
		}
		if r.maxSeen > capV {
			t.Fatalf("generator saw %g Vpp, cap %g", r.maxSeen, capV)
		}
		if len(r.bad) > 0 {
			t.Fatalf("invariants broken: %q\ncalls: %q", r.bad, r.calls)
		}
	})
}

// TestGuardOffAfterCancel: Off uses its own context, so it is sent even
// when every caller context has ended (the recGen flags an off sent on a
// dead context).
func TestGuardOffAfterCancel(t *testing.T) {
	r := &recGen{capV: 1}
	g, _ := NewGuard(r, 1, func(time.Duration) {})
	ctx, cancel := context.WithCancel(context.Background())
	if err := g.SetAmplitude(ctx, 0.5); err != nil {
		t.Fatal(err)
	}
	if err := g.SetOutput(ctx, true); err != nil {
		t.Fatal(err)
	}
	cancel()
	// A ramp on the dead context stops at once and sends nothing.
	if err := g.SetAmplitude(ctx, 0.5); err != nil {
		t.Logf("equal step on a dead context: %v", err)
	}
	if err := g.Off(); err != nil {
		t.Fatal(err)
	}
	if r.on {
		t.Error("output on after Off")
	}
	if len(r.bad) > 0 {
		t.Errorf("invariants broken: %q", r.bad)
	}
}

// TestGuardUnknownStateAfterFailedOff: when an output command fails the
// state is unknown, so OutputOn reports true until an off succeeds.
func TestGuardUnknownStateAfterFailedOff(t *testing.T) {
	r := &recGen{capV: 1}
	g, _ := NewGuard(r, 1, func(time.Duration) {})
	ctx := context.Background()
	_ = g.SetAmplitude(ctx, 0.1)
	_ = g.SetOutput(ctx, true)
	r.fail = 1
	if err := g.Off(); err == nil {
		t.Fatal("Off with a failing generator: no error")
	}
	if !g.OutputOn() {
		t.Error("OutputOn false after a failed Off")
	}
	if err := g.Off(); err != nil {
		t.Fatal(err)
	}
	if g.OutputOn() || r.on {
		t.Error("output on after a successful Off")
	}
}

// TestGuardShutdownLatches: after Shutdown nothing but off reaches the
// generator.
func TestGuardShutdownLatches(t *testing.T) {
	r := &recGen{capV: 1}
	g, _ := NewGuard(r, 1, func(time.Duration) {})
	ctx := context.Background()
	_ = g.SetAmplitude(ctx, 0.1)
	_ = g.SetOutput(ctx, true)
	if err := g.Shutdown(); err != nil {
		t.Fatal(err)
	}
	r.calls = nil
	if err := g.SetAmplitude(ctx, 0.1); !errors.Is(err, ErrShutdown) || !errors.Is(err, context.Canceled) {
		t.Errorf("amplitude after Shutdown: err = %v, want ErrShutdown and context.Canceled", err)
	}
	if err := g.SetOutput(ctx, true); !errors.Is(err, ErrShutdown) {
		t.Errorf("output on after Shutdown: err = %v, want ErrShutdown", err)
	}
	if err := g.SetOutput(ctx, false); err != nil {
		t.Errorf("output off after Shutdown: %v", err)
	}
	if fmt.Sprint(r.calls) != "[output false]" || r.on {
		t.Errorf("after Shutdown the generator got %q (on %v), want only an off", r.calls, r.on)
	}
}

// checkGen forwards to a Generator and checks, from the calls alone, the
// same invariants as recGen.
type checkGen struct {
	Generator
	capV float64
	on   bool
	amp  float64
	bad  []string
}

func (c *checkGen) SetAmplitude(ctx context.Context, vpp float64) error {
	if !(vpp > 0) || vpp > c.capV {
		c.bad = append(c.bad, fmt.Sprintf("amplitude %g Vpp (cap %g)", vpp, c.capV))
	}
	if c.on && c.amp > 0 && vpp > c.amp*GuardRampRatio*(1+1e-12) {
		c.bad = append(c.bad, fmt.Sprintf("step %g -> %g Vpp with the output on", c.amp, vpp))
	}
	c.amp = vpp
	return c.Generator.SetAmplitude(ctx, vpp)
}

func (c *checkGen) SetOutput(ctx context.Context, on bool) error {
	if on && !(c.amp > 0) {
		c.bad = append(c.bad, "output on before any amplitude")
	}
	c.on = on
	return c.Generator.SetOutput(ctx, on)
}

// TestEngineThroughGuard runs the engine behind a Guard over random
// plans, amplitude profiles (breakpoints up to twice the cap, so the
// profile asks for more than allowed) and automatic level control: the
// sweep completes (the engine never asks the guard for anything it must
// refuse), and the generator sees no amplitude above the cap, no output
// before an amplitude, no step up of more than ×2 with the output on,
// and the output off at the end.
func TestEngineThroughGuard(t *testing.T) {
	ran, refused := 0, 0
	defer func() { t.Logf("%d sweeps run through the guard, %d settings refused by New", ran, refused) }()
	rapid.Check(t, func(rt *rapid.T) {
		clk := newClock()
		b := newBench(clk, injLoop3(rapid.Float64Range(0.2, 20).Draw(rt, "K"), 1000))
		s := Defaults()
		s.StartHz = rapid.Float64Range(50, 2000).Draw(rt, "start")
		s.StopHz = s.StartHz * rapid.Float64Range(1.5, 30).Draw(rt, "span")
		s.PerDecade = rapid.IntRange(2, 6).Draw(rt, "ppd")
		s.MaxAmpVpp = rapid.Float64Range(0.001, 0.5).Draw(rt, "cap")
		s.AmpVpp = s.MaxAmpVpp * rapid.Float64Range(0.01, 1).Draw(rt, "ampfrac")
		s.AutoAmp = rapid.Bool().Draw(rt, "auto")
		if rapid.Bool().Draw(rt, "profile") {
			s.AmpProfile = []AmpBreak{
				{s.StartHz, s.MaxAmpVpp * rapid.Float64Range(0.01, 2).Draw(rt, "p0")},
				{s.StopHz, s.MaxAmpVpp * rapid.Float64Range(0.01, 2).Draw(rt, "p1")},
			}
		}
		s.RefineBudget = 2
		cg := &checkGen{Generator: b, capV: s.MaxAmpVpp}
		g, err := NewGuard(cg, s.MaxAmpVpp, func(d time.Duration) { clk.advance(d) })
		if err != nil {
			rt.Fatal(err)
		}
		e, err := New(Config{Settings: s, Gen: g, Dig: b, Sleep: clk.Sleep, Now: clk.Now})
		if err != nil {
			// A profile above the cap is refused before any instrument
			// is touched: nothing to check at the generator.
			if len(cg.bad) > 0 || b.Output() {
				rt.Fatalf("refused settings touched the generator")
			}
			refused++
			return
		}
		if err := e.Run(context.Background()); err != nil {
			rt.Fatalf("Run through the guard: %v", err)
		}
		ran++
		if len(cg.bad) > 0 {
			rt.Fatalf("invariants broken: %q", cg.bad)
		}
		if b.Output() || g.OutputOn() {
			rt.Fatal("output left on")
		}
	})
}
