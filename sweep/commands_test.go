package sweep

import (
	"context"
	"math"
	"strings"
	"sync/atomic"
	"testing"
)

func TestChosenBestByUncertainty(t *testing.T) {
	s := Session{Points: []Point{{FreqHz: 100, Chosen: -1, Attempts: []Attempt{
		{GainSigmaDB: 0.5, PhaseSigmaDeg: 3},
		{GainSigmaDB: 0.05, PhaseSigmaDeg: 0.3, Problem: "clipped at the largest range"},
		{GainSigmaDB: 0.1, PhaseSigmaDeg: 0.6},
		{GainSigmaDB: 0.2, PhaseSigmaDeg: 1.2},
	}}}}
	// The smallest uncertainty among the attempts with no problem is
	// attempt 2 (0.1 dB, 0.6°); attempt 1 is better but clipped.
	a, ok := s.Chosen(0)
	if !ok || a.GainSigmaDB != 0.1 {
		t.Errorf("Chosen = %+v, %v; want the 0.1 dB attempt", a, ok)
	}
	s.Points[0].Chosen = 3
	if a, _ := s.Chosen(0); a.GainSigmaDB != 0.2 {
		t.Errorf("user's choice ignored: got σ %g, want 0.2", a.GainSigmaDB)
	}
	if _, ok := s.Chosen(5); ok {
		t.Errorf("Chosen(5) reported an attempt for a missing point")
	}
}

func TestRefinementAddsPointsAtCrossovers(t *testing.T) {
	const K, f0 = 2.0, 1000.0
	r := newRig(t, injLoop3(K, f0))
	ch := make(chan Event)
	r.cfg.Events = ch
	e, err := New(r.cfg)
	if err != nil {
		t.Fatal(err)
	}
	var added []float64
	var last *MarginsUpdated
	refining := false
	err = collect(t, e, ch, func(ev Event) {
		switch ev := ev.(type) {
		case PointAdded:
			added = append(added, ev.FreqHz)
		case MarginsUpdated:
			last = &ev
		case StateChanged:
			if ev.State == Refining {
				refining = true
			}
		}
	})
	if err != nil {
		t.Fatal(err)
	}
	if !refining {
		t.Errorf("never entered the Refining state")
	}
	if len(added) == 0 || len(added) > r.cfg.Settings.RefineBudget {
		t.Fatalf("refinement added %d points, want 1..%d", len(added), r.cfg.Settings.RefineBudget)
	}
	// Every added point lies near a crossing: the phase crossover at
	// √2·f0 (closed form) or the gain crossover found by bisection.
	fc := gainCrossoverBisect(r.bench.L, 100, 10e3)
	for _, f := range added {
		if math.Abs(math.Log(f/fc)) > 0.05 && math.Abs(math.Log(f/(math.Sqrt2*f0))) > 0.05 {
			t.Errorf("added %g Hz, not within 5%% of a crossing (%g, %g Hz)", f, fc, math.Sqrt2*f0)
		}
	}
	if last == nil || len(last.Margins.GainCrossovers) != 1 {
		t.Fatalf("last MarginsUpdated: %+v", last)
	}
	if s := last.Margins.GainCrossovers[0].SigmaDeg; s > r.cfg.Settings.RefinePMDeg {
		t.Errorf("PM uncertainty %.3f° after refinement, target %g°", s, r.cfg.Settings.RefinePMDeg)
	}
}

func TestRemeasureFlaggedAndUpdateSettings(t *testing.T) {
	r := newRig(t, injLoop3(2, 1000))
	r.cfg.Settings.StopHz = 1000
	r.cfg.Settings.RefineBudget = 0
	r.cfg.Linger = true
	var noisy atomic.Bool
	noisy.Store(true)
	r.bench.noiseAt = func(f float64) float64 {
		if noisy.Load() && math.Abs(f-251.2) < 2 {
			return 2
		}
		return 0
	}
	ch := make(chan Event)
	r.cfg.Events = ch
	e, err := New(r.cfg)
	if err != nil {
		t.Fatal(err)
	}
	dones := 0
	err = collect(t, e, ch, func(ev Event) {
		st, ok := ev.(StateChanged)
		if !ok || st.State != Done {
			return
		}
		dones++
		switch dones {
		case 1:
			noisy.Store(false) // the bench is fixed
			n, err := e.RemeasureFlagged(nil)
			if err != nil || n != 1 {
				t.Errorf("RemeasureFlagged = %d, %v; want 1", n, err)
			}
		case 2:
			s := e.Settings()
			s.StopHz = 100 * math.Pow(10, 1.3) // the same grid, three points further
			if err := e.UpdateSettings(s); err != nil {
				t.Errorf("UpdateSettings: %v", err)
			}
		default:
			e.Stop()
		}
	})
	if err != nil {
		t.Fatal(err)
	}
	s := e.Snapshot()
	for _, p := range s.Points {
		if math.Abs(p.FreqHz-251.2) < 1 {
			if p.Flagged {
				t.Errorf("re-measured point still flagged: %s", p.Flag)
			}
			if len(p.Attempts) != r.cfg.Settings.MaxAttempts+1 {
				t.Errorf("point has %d attempts, want the %d bad ones kept and the good one", len(p.Attempts), r.cfg.Settings.MaxAttempts)
			}
			if last := p.Attempts[len(p.Attempts)-1]; last.Reason != "user: flagged" || last.Problem != "" {
				t.Errorf("last attempt reason %q problem %q", last.Reason, last.Problem)
			}
		}
	}
	// 100 Hz..10^3.3 Hz at 10 per decade is 100·10^(k/10), k = 0..13:
	// the eleven points to 1 kHz are kept and three are added.
	if len(s.Points) != 14 {
		t.Errorf("session has %d points, want 14", len(s.Points))
	}
	var want []float64
	for k := 0; k <= 13; k++ {
		want = append(want, 100*math.Pow(10, float64(k)/10))
	}
	for _, f := range want {
		found := false
		for _, p := range s.Points {
			if math.Abs(p.FreqHz-f) <= 1e-6*f {
				found = len(p.Attempts) > 0
			}
		}
		if !found {
			t.Errorf("new plan frequency %g Hz not measured", f)
		}
	}
	if err := e.Remeasure(len(s.Points), nil); err == nil {
		t.Errorf("Remeasure of a missing point accepted")
	}
}

func TestAutoAmpReachesTargetWithinCap(t *testing.T) {
	r := newRig(t, injLoop3(2, 1000))
	r.bench.noiseV = 2e-3
	r.cfg.Settings.AutoAmp = true
	r.cfg.Settings.AmpVpp = 0.002
	r.cfg.Settings.MaxAmpVpp = 0.1
	r.cfg.Settings.StopHz = 1000
	_, s := r.run(t)
	last := s.Points[len(s.Points)-1]
	a, _ := s.Chosen(len(s.Points) - 1)
	if a.AmpVpp <= 0.002 {
		t.Errorf("level control never raised the amplitude (last %g Vpp)", a.AmpVpp)
	}
	if r.bench.maxAmpSet > 0.1 {
		t.Errorf("amplitude %g above the cap", r.bench.maxAmpSet)
	}
	if snr := math.Min(a.Ch1.SNRdB, a.Ch2.SNRdB); snr < r.cfg.Settings.TargetSNRdB-6 && a.AmpVpp < 0.1 {
		t.Errorf("%g Hz: SNR %.1f dB, target %g dB, amplitude %g Vpp below the cap", last.FreqHz, snr, r.cfg.Settings.TargetSNRdB, a.AmpVpp)
	}
}

func TestRampedAmplitudeSteps(t *testing.T) {
	r := newRig(t, injLoop3(2, 1000))
	r.cfg.Settings.StartHz, r.cfg.Settings.StopHz = 100, 1000
	r.cfg.Settings.MaxAmpVpp = 0.1
	r.cfg.Settings.AmpProfile = []AmpBreak{{100, 0.001}, {200, 0.1}}
	r.cfg.Settings.AmpVpp = 0.001
	r.run(t)
	// With the output on, no amplitude command more than doubles the
	// previous one.
	prev, on := 0.0, false
	for _, l := range r.bench.log {
		var v float64
		switch {
		case l == "output true":
			on = true
		case l == "output false":
			on = false
		default:
			if n, _ := fmtSscan(l, &v); n == 1 {
				if on && prev > 0 && v > 2*prev*(1+1e-9) {
					t.Errorf("amplitude stepped from %g to %g Vpp with the output on", prev, v)
				}
				prev = v
			}
		}
	}
}

func TestPauseCutsSettlingShort(t *testing.T) {
	// A Pause during the settling wait ends the wait: the sleep sees
	// its context cancelled.
	r := newRig(t, injLoop3(2, 1000))
	r.cfg.Settings.StopHz = 200
	var e *Engine
	paused := false
	r.cfg.Sleep = func(ctx context.Context, d timeDuration) error {
		if !paused {
			paused = true
			e.Pause()
			if ctx.Err() == nil {
				t.Errorf("Pause did not cancel the settling wait")
			}
			go e.Resume()
		}
		return r.clk.Sleep(ctx, d)
	}
	var err error
	e, err = New(r.cfg)
	if err != nil {
		t.Fatal(err)
	}
	if err := e.Run(context.Background()); err != nil {
		t.Fatal(err)
	}
	if n := countMeasured(e.Snapshot()); n != len(e.Snapshot().Points) {
		t.Errorf("%d of %d points measured after pause and resume", n, len(e.Snapshot().Points))
	}
}

func TestAutoAmpBacksOffOnHarmonics(t *testing.T) {
	// Square-law distortion on channel 2: H2 is h2k·|Y| relative to the
	// tone, so −30 dBc (0.0316) is reached at |Y| = 0.0316/h2k.
	r := newRig(t, injLoop3(2, 1000))
	r.bench.h2k = 4
	r.bench.noiseV = 1e-3
	s := &r.cfg.Settings
	s.AutoAmp, s.TargetSNRdB, s.MaxHarmonicDB = true, 70, -30
	s.AmpVpp, s.MaxAmpVpp = 0.01, 0.1
	s.StartHz, s.StopHz = 100, 400
	s.RefineBudget = 0
	_, sess := r.run(t)
	backedOff := false
	for _, p := range sess.Points {
		for _, a := range p.Attempts {
			if strings.HasPrefix(a.Problem, "harmonics") {
				backedOff = true
			}
		}
	}
	if !backedOff {
		t.Fatalf("the level control never met the distortion: the test does not exercise it")
	}
	// After the first encounter every chosen attempt stays near or below
	// the limit: square law, so halving the amplitude lowers H2 by 6 dB.
	last := len(sess.Points) - 1
	a, _ := sess.Chosen(last)
	if a.Ch2.H2dBc > s.MaxHarmonicDB+1 {
		t.Errorf("last point: H2 %.1f dBc above the %g dBc limit", a.Ch2.H2dBc, s.MaxHarmonicDB)
	}
}
