package sweep

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/cmplx"
	"math/rand/v2"
	"sync"
	"time"

	"loopsweep/instr"
)

// fakeClock is the injected clock and sleep: sleeping advances it, so no
// test waits for real settling.
type fakeClock struct {
	mu    sync.Mutex
	t, t0 time.Time
}

func newClock() *fakeClock {
	t := time.Date(2026, 1, 2, 3, 4, 5, 0, time.UTC)
	return &fakeClock{t: t, t0: t}
}

func (c *fakeClock) Now() time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.t
}

func (c *fakeClock) advance(d time.Duration) {
	c.mu.Lock()
	c.t = c.t.Add(d)
	c.mu.Unlock()
}

func (c *fakeClock) Sleep(ctx context.Context, d time.Duration) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	c.advance(d)
	return nil
}

// fakeBench is a generator and digitizer wired to a closed-form loop
// gain L(f) by voltage injection (Middlebrook 1975): the injected source
// v_z sits between the node y returning from the loop and the node x
// driving it, x = y + v_z and y = −L·x, so x = v_z/(1+L) and
// y = −L·v_z/(1+L). Channel 1 probes x, channel 2 probes y. Records
// carry a DC operating point, white noise, an optional transient after
// each frequency change, clipping at the input window and 8-bit
// quantisation over it.
type fakeBench struct {
	mu  sync.Mutex
	clk *fakeClock
	L   func(f float64) complex128
	// mismatch multiplies channel 2 (probe/channel gain and phase error).
	mismatch complex128
	// sameNode puts both probes on x (calibration set-up).
	sameNode bool
	dc       [2]float64
	noiseV   float64
	noiseAt  func(f float64) float64 // extra noise at some frequencies
	rng      *rand.Rand
	bits     int
	maxPts   int
	ac       bool

	// transient: after each frequency change both nodes ring at
	// transHz with amplitude transRel·(v_z peak), decaying with transTau.
	transRel float64
	transHz  float64
	transTau time.Duration

	// ripple adds a sine of rippleV peak at rippleHz to both channels
	// (switching ripple on the output node, which x = y + v_z carries).
	rippleV, rippleHz float64
	// steps125 rounds the sample interval to the nearest of a 1-2-5
	// sequence (in log), as many digitizers' timebases do.
	steps125 bool

	// h2k adds a second harmonic to channel 2 of h2k·|Y|² volts (a
	// square-law nonlinearity: its level relative to the tone is h2k·|Y|).
	h2k float64

	on        bool
	freq, amp float64
	changedAt time.Time
	maxAmpOn  float64 // largest amplitude while the output was on
	maxAmpSet float64
	cfg       instr.CaptureSettings
	log       []string
	captures  int
	clips     int

	failCapture int   // fail the n-th capture (1-based); 0 never
	failErr     error // the error it returns
	drainErr    func() error
}

func newBench(clk *fakeClock, L func(float64) complex128) *fakeBench {
	return &fakeBench{
		clk: clk, L: L, mismatch: 1, dc: [2]float64{5, 5}, noiseV: 1e-4,
		rng: rand.New(rand.NewPCG(1, 2)), bits: 8, maxPts: 100000,
	}
}

func (b *fakeBench) logf(format string, a ...any) {
	b.log = append(b.log, fmt.Sprintf(format, a...))
}

func (b *fakeBench) SetFrequency(ctx context.Context, hz float64) error {
	b.mu.Lock()
	defer b.mu.Unlock()
	b.logf("freq %g", hz)
	if hz != b.freq {
		b.changedAt = b.clk.Now()
	}
	b.freq = hz
	return nil
}

func (b *fakeBench) SetAmplitude(ctx context.Context, vpp float64) error {
	b.mu.Lock()
	defer b.mu.Unlock()
	b.logf("amp %g", vpp)
	b.amp = vpp
	b.maxAmpSet = math.Max(b.maxAmpSet, vpp)
	if b.on {
		b.maxAmpOn = math.Max(b.maxAmpOn, vpp)
	}
	return nil
}

func (b *fakeBench) SetOutput(ctx context.Context, on bool) error {
	b.mu.Lock()
	defer b.mu.Unlock()
	b.logf("output %v", on)
	if on && !b.on {
		b.changedAt = b.clk.Now()
		b.maxAmpOn = math.Max(b.maxAmpOn, b.amp)
	}
	b.on = on
	return nil
}

func (b *fakeBench) Output() bool {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.on
}

// roundRange rounds a range up to the 1-2-5 sequence, as many
// digitizers do (common practice), between 1 mV and 500 V.
func roundRange(r float64) float64 {
	for d := 1e-3; d <= 500; d *= 10 {
		for _, m := range []float64{1, 2, 5} {
			if r <= d*m*(1+1e-12) {
				return d * m
			}
		}
	}
	return 500
}

func (b *fakeBench) Configure(ctx context.Context, want instr.CaptureSettings) (instr.CaptureSettings, error) {
	b.mu.Lock()
	defer b.mu.Unlock()
	got := want
	// The timebase runs in steps of 10 ns.
	got.IntervalS = math.Max(1e-8, math.Round(want.IntervalS/1e-8)*1e-8)
	if b.steps125 {
		got.IntervalS = nearest125(want.IntervalS)
	}
	if got.Points > b.maxPts {
		got.Points = b.maxPts
	}
	if got.Points < 1 {
		return got, errors.New("fake: no points")
	}
	for c := range got.Channels {
		got.Channels[c].RangeV = roundRange(want.Channels[c].RangeV)
		got.Channels[c].AC = want.Channels[c].AC && b.ac
		if got.Channels[c].AC {
			got.Channels[c].OffsetV = 0
		}
	}
	b.cfg = got
	b.logf("configure %d %g", got.Points, got.IntervalS)
	return got, nil
}

func (b *fakeBench) Capture(ctx context.Context, ch1, ch2 []float64) error {
	b.mu.Lock()
	defer b.mu.Unlock()
	b.captures++
	if b.failCapture > 0 && b.captures == b.failCapture {
		return b.failErr
	}
	n := b.cfg.Points
	if len(ch1) != n || len(ch2) != n {
		return fmt.Errorf("fake: buffers %d, %d for %d points", len(ch1), len(ch2), n)
	}
	t0 := b.clk.Now().Sub(b.changedAt).Seconds()
	dt := b.cfg.IntervalS
	w := 2 * math.Pi * b.freq
	vz := 0.0
	if b.on {
		vz = b.amp / 2
	}
	L := b.L(b.freq)
	X := complex(vz, 0) / (1 + L)
	Y := -L * X
	if b.sameNode {
		Y = X
	}
	Y *= b.mismatch
	noise := b.noiseV
	if b.noiseAt != nil {
		noise += b.noiseAt(b.freq)
	}
	clipped := false
	for k := 0; k < n; k++ {
		t := float64(k) * dt
		tr := 0.0
		if b.transRel > 0 {
			ts := t0 + t
			tr = b.transRel * vz * math.Exp(-ts/b.transTau.Seconds()) * math.Cos(2*math.Pi*b.transHz*ts)
		}
		for c, P := range []complex128{X, Y} {
			dc := b.dc[c]
			if b.cfg.Channels[c].AC {
				dc = 0
			}
			v := dc + cmplx.Abs(P)*math.Cos(w*t+cmplx.Phase(P)) + tr + noise*b.rng.NormFloat64()
			if b.rippleV > 0 {
				v += b.rippleV * math.Sin(2*math.Pi*b.rippleHz*(b.clk.Now().Sub(b.clk.t0).Seconds()+t))
			}
			if c == 1 && b.h2k > 0 {
				v += b.h2k * cmplx.Abs(P) * cmplx.Abs(P) * math.Cos(2*(w*t+cmplx.Phase(P)))
			}
			lo := b.cfg.Channels[c].OffsetV - b.cfg.Channels[c].RangeV
			hi := b.cfg.Channels[c].OffsetV + b.cfg.Channels[c].RangeV
			if v < lo {
				v, clipped = lo, true
			}
			if v > hi {
				v, clipped = hi, true
			}
			q := (hi - lo) / float64(int(1)<<b.bits)
			v = lo + math.Round((v-lo)/q)*q
			if c == 0 {
				ch1[k] = v
			} else {
				ch2[k] = v
			}
		}
	}
	if clipped {
		b.clips++
	}
	b.clk.advance(time.Duration(float64(n) * dt * float64(time.Second)))
	return nil
}

type drainingBench struct{ *fakeBench }

func (d drainingBench) DrainErrors(ctx context.Context) error {
	if d.drainErr == nil {
		return nil
	}
	return d.drainErr()
}

// injLoop3 returns L(s) = K/(u(u+1)(u+2)) with u = s/ω0, ω0 = 2π·f0.
// Closed form (REFERENCES, control theory): the phase crossover is at
// u = j√2, where |L| = K/6, so GM = 6/K.
func injLoop3(K, f0 float64) func(float64) complex128 {
	return func(f float64) complex128 {
		u := complex(0, f/f0)
		return complex(K, 0) / (u * (u + 1) * (u + 2))
	}
}

// gainCrossoverBisect finds |L(f)| = 1 between lo and hi by bisection
// (|L| falls monotonically for injLoop3).
func gainCrossoverBisect(L func(float64) complex128, lo, hi float64) float64 {
	for i := 0; i < 200; i++ {
		m := math.Sqrt(lo * hi)
		if cmplx.Abs(L(m)) > 1 {
			lo = m
		} else {
			hi = m
		}
	}
	return math.Sqrt(lo * hi)
}

type timeDuration = time.Duration

// fmtSscan reads the amplitude from an "amp V" log line.
func fmtSscan(line string, v *float64) (int, error) { return fmt.Sscanf(line, "amp %g", v) }

// nearest125 rounds x to the nearest (in log) of 1, 2, 5 × 10^k.
func nearest125(x float64) float64 {
	best := 0.0
	for e := -10; e <= 2; e++ {
		for _, m := range []float64{1, 2, 5} {
			v := m * math.Pow(10, float64(e))
			if best == 0 || math.Abs(math.Log(v/x)) < math.Abs(math.Log(best/x)) {
				best = v
			}
		}
	}
	return best
}
