package sweep

// Acceptance tests against the simulated bench over real loopback TCP:
// the sim package's SCPI server, the instr drivers with the built-in
// generic profiles, and the engine at default settings.

import (
	"context"
	"fmt"
	"math"
	"math/cmplx"
	"path/filepath"
	"sort"
	"testing"
	"time"

	"loopsweep/analysis"
	"loopsweep/instr"
	"loopsweep/sim"
)

// simRig is a running simulator with both instruments connected.
type simRig struct {
	srv *sim.Server
	gen *instr.Generator
	dig *instr.Digitizer
	gs  *instr.Session
	ds  *instr.Session
}

func startSim(t testing.TB, scenario, load string) *simRig {
	t.Helper()
	srv, err := sim.Start(sim.Options{Listen: "127.0.0.1:0", Scenario: scenario, Load: load})
	if err != nil {
		t.Fatalf("start sim %s/%s: %v", scenario, load, err)
	}
	t.Cleanup(func() { srv.Close() })
	return connectSim(t, srv)
}

// connectSim connects the generic-profile drivers to a running simulator.
func connectSim(t testing.TB, srv *sim.Server) *simRig {
	t.Helper()
	open := func(addr string) *instr.Session {
		c, err := instr.Open(addr, instr.Options{})
		if err != nil {
			t.Fatalf("open %s: %v", addr, err)
		}
		t.Cleanup(func() { c.Close() })
		return instr.NewSession(c, 5*time.Second)
	}
	r := &simRig{srv: srv, gs: open(srv.GenAddr()), ds: open(srv.DigAddr())}
	gp, err := instr.BuiltinProfile("generator")
	if err != nil {
		t.Fatal(err)
	}
	dp, err := instr.BuiltinProfile("digitizer")
	if err != nil {
		t.Fatal(err)
	}
	if r.gen, err = instr.NewGenerator(r.gs, gp); err != nil {
		t.Fatal(err)
	}
	if r.dig, err = instr.NewDigitizer(r.ds, dp); err != nil {
		t.Fatal(err)
	}
	return r
}

func (r *simRig) config(s Settings) Config {
	return Config{
		Settings:    s,
		Gen:         r.gen,
		Dig:         r.dig,
		ACCoupling:  r.dig.SupportsAC(),
		FixedOffset: !r.dig.SupportsOffset(),
		MaxPoints:   r.dig.MaxPoints(),
	}
}

// physicalAll is the settling plus capture time of every attempt taken
// (retries included): what the measurement itself asked for. An attempt
// settles only when it changed the tone or the amplitude from the attempt
// before it in time: a retry at the same settings waits for nothing (the
// engine then sends nothing), so counting a settling wait for it would
// flatter the ratio.
func physicalAll(s Session) time.Duration {
	type taken struct {
		a    Attempt
		tone float64
	}
	var all []taken
	for _, p := range s.Points {
		for _, a := range p.Attempts {
			all = append(all, taken{a, a.Tone(p.FreqHz)})
		}
	}
	sort.Slice(all, func(i, j int) bool { return all[i].a.Started.Before(all[j].a.Started) })
	var d time.Duration
	for i, t := range all {
		if i == 0 || math.Abs(t.tone-all[i-1].tone) > 1e-9*t.tone || t.a.AmpVpp != all[i-1].a.AmpVpp {
			d += s.Settings.SettleTime(t.tone)
		}
		d += time.Duration(float64(t.a.RecordLength) * t.a.IntervalS * float64(time.Second))
	}
	return d
}

// physicalMinimum is the time a sweep cannot go below: for every point,
// the settling wait at its tone plus the capture time of its chosen
// attempt (record length × actual sample interval).
func physicalMinimum(s Session) time.Duration {
	var d time.Duration
	for i, p := range s.Points {
		a, ok := s.Chosen(i)
		if !ok {
			continue
		}
		d += s.Settings.SettleTime(a.Tone(p.FreqHz))
		d += time.Duration(float64(a.RecordLength) * a.IntervalS * float64(time.Second))
	}
	return d
}

// BenchmarkSweepOverhead runs a default sweep (no refinement) against the
// simulator and reports wall time over the physical minimum measured in
// the same run (target: at most 1.10): wall/physical counts one attempt
// per point, wall/physical-all-attempts every attempt the judge asked for.
// The session is saved after every point to a file in a temporary
// directory, as a real sweep saves it.
func BenchmarkSweepOverhead(b *testing.B) {
	r := startSim(b, "", "")
	s := Defaults()
	s.StartHz, s.StopHz = 200, 20e3
	s.RefineBudget = 0
	dir := b.TempDir()
	var wall, phys, all time.Duration
	for i := 0; i < b.N; i++ {
		cfg := r.config(s)
		cfg.Out = filepath.Join(dir, fmt.Sprintf("session-%d.json", i))
		e, err := New(cfg)
		if err != nil {
			b.Fatal(err)
		}
		t0 := time.Now()
		if err := e.Run(context.Background()); err != nil {
			b.Fatal(err)
		}
		wall += time.Since(t0)
		phys += physicalMinimum(e.Snapshot())
		all += physicalAll(e.Snapshot())
	}
	b.ReportMetric(float64(wall)/float64(phys), "wall/physical")
	b.ReportMetric(float64(wall)/float64(all), "wall/physical-all-attempts")
	b.ReportMetric(phys.Seconds()/float64(b.N), "physical-s/op")
}

// Tolerances of issue 5's acceptance: PM within 1°, GM within 0.5 dB,
// crossover frequencies within 1% of the model's truth.
const (
	acceptPMDeg   = 1.0
	acceptGMDB    = 0.5
	acceptFreqRel = 0.01
)

func TestAcceptanceBuiltinScenarios(t *testing.T) {
	if testing.Short() {
		t.Skip("acceptance sweeps take real time")
	}
	for _, sc := range sim.Builtin() {
		for _, load := range sc.Loads() {
			t.Run(sc.Name+"/"+load, func(t *testing.T) {
				t.Parallel()
				truth, err := sc.TrueMargins(load)
				if err != nil {
					t.Fatal(err)
				}
				r := startSim(t, sc.Name, load)
				e, err := New(r.config(simDefaults(sc)))
				if err != nil {
					t.Fatal(err)
				}
				if err := e.Run(context.Background()); err != nil {
					t.Fatalf("Run: %v", err)
				}
				if r.srv.OutputOn() {
					t.Errorf("simulator output left on")
				}
				s := e.Snapshot()
				m, err := s.Margins()
				if err != nil {
					t.Fatal(err)
				}
				checkMargins(t, m, truth)
			})
		}
	}
}

func checkMargins(t *testing.T, m analysis.Margins, truth sim.TrueMargins) {
	t.Helper()
	if truth.CrossoverHz == nil {
		if m.WorstPM >= 0 {
			t.Errorf("measured a gain crossover at %g Hz; the model has none in band", m.GainCrossovers[m.WorstPM].FreqHz)
		}
	} else if m.WorstPM < 0 {
		t.Errorf("no gain crossover measured; the model's is at %g Hz", *truth.CrossoverHz)
	} else {
		g := m.GainCrossovers[m.WorstPM]
		if d := math.Abs(g.FreqHz / *truth.CrossoverHz - 1); d > acceptFreqRel {
			t.Errorf("crossover %.4g Hz, model %.4g Hz (%.2f%%)", g.FreqHz, *truth.CrossoverHz, 100*d)
		}
		if d := math.Abs(g.PhaseMarginDeg - *truth.PhaseMarginDeg); d > acceptPMDeg {
			t.Errorf("PM %.2f°, model %.2f°", g.PhaseMarginDeg, *truth.PhaseMarginDeg)
		}
		t.Logf("crossover %.5g Hz ± %.2f%% (model %.5g, off %+.3f%%), PM %.2f° ± %.2f (model %.2f°)", g.FreqHz, 100*g.SigmaFreqHz/g.FreqHz, *truth.CrossoverHz, 100*(g.FreqHz / *truth.CrossoverHz - 1), g.PhaseMarginDeg, g.SigmaDeg, *truth.PhaseMarginDeg)
	}
	if truth.PhaseCrossoverHz == nil {
		if m.WorstGM >= 0 {
			t.Errorf("measured a phase crossover at %g Hz; the model has none in band", m.PhaseCrossovers[m.WorstGM].FreqHz)
		}
	} else if m.WorstGM < 0 {
		t.Errorf("no phase crossover measured; the model's is at %g Hz", *truth.PhaseCrossoverHz)
	} else {
		p := m.PhaseCrossovers[m.WorstGM]
		if d := math.Abs(p.FreqHz / *truth.PhaseCrossoverHz - 1); d > acceptFreqRel {
			t.Errorf("phase crossover %.4g Hz, model %.4g Hz (%.2f%%)", p.FreqHz, *truth.PhaseCrossoverHz, 100*d)
		}
		if d := math.Abs(p.GainMarginDB - *truth.GainMarginDB); d > acceptGMDB {
			t.Errorf("GM %.2f dB, model %.2f dB", p.GainMarginDB, *truth.GainMarginDB)
		}
		t.Logf("phase crossover %.5g Hz ± %.2f%% (model %.5g, off %+.3f%%), GM %.2f dB ± %.2f (model %.2f dB)", p.FreqHz, 100*p.SigmaFreqHz/p.FreqHz, *truth.PhaseCrossoverHz, 100*(p.FreqHz / *truth.PhaseCrossoverHz - 1), p.GainMarginDB, p.SigmaDB, *truth.GainMarginDB)
	}
}

// simDefaults are the settings `loopsweep sweep --sim` uses with no
// flags: the defaults, with the converter's switching frequency known
// and the plan stopping at half of it.
func simDefaults(sc *sim.Scenario) Settings {
	s := Defaults()
	s.SwitchingHz = sc.SwitchingHz
	s.StopHz = sc.SwitchingHz / 2
	return s
}

// pointErrors returns the largest |measured − model| gain error in dB
// over the chosen attempts, and the largest in units of the point's own
// standard uncertainty.
func pointErrors(t *testing.T, s Session, sc *sim.Scenario, load string) (worstDB, worstSigmas float64) {
	t.Helper()
	for i, p := range s.Points {
		a, ok := s.Chosen(i)
		if !ok {
			continue
		}
		L, err := sc.Loop(load, a.Tone(p.FreqHz))
		if err != nil {
			t.Fatal(err)
		}
		d := math.Abs(a.GainDB - 20*math.Log10(cmplx.Abs(L)))
		worstDB = math.Max(worstDB, d)
		worstSigmas = math.Max(worstSigmas, d/math.Max(a.GainSigmaDB, 1e-3))
	}
	return worstDB, worstSigmas
}

func TestSimClippingCorrected(t *testing.T) {
	if testing.Short() {
		t.Skip("sweeps take real time")
	}
	sc, err := sim.LoadScenario("well-compensated")
	if err != nil {
		t.Fatal(err)
	}
	r := startSim(t, sc.Name, "full")
	s := simDefaults(sc)
	s.StartHz, s.StopHz, s.PerDecade = 2000, 20e3, 5
	s.RefineBudget = 0
	c := r.config(s)
	c.InitialRangeV = 1e-3 // the 10 mV injection clips a 1 mV window at once
	e, err := New(c)
	if err != nil {
		t.Fatal(err)
	}
	if err := e.Run(context.Background()); err != nil {
		t.Fatal(err)
	}
	sess := e.Snapshot()
	for i, p := range sess.Points {
		a, _ := sess.Chosen(i)
		if a.Ch1.Clipped || a.Ch2.Clipped {
			t.Errorf("%g Hz: the chosen attempt clipped", p.FreqHz)
		}
		if a.Ch1.RangeV <= 1e-3 && a.Ch2.RangeV <= 1e-3 {
			t.Errorf("%g Hz: range never grew from 1 mV", p.FreqHz)
		}
	}
	if _, sig := pointErrors(t, sess, sc, "full"); sig > 4 {
		t.Errorf("worst gain error %.1fσ after clipping was corrected", sig)
	}
}

func TestSimPauseResumeRemeasureOutputOff(t *testing.T) {
	if testing.Short() {
		t.Skip("sweeps take real time")
	}
	sc, err := sim.LoadScenario("marginal")
	if err != nil {
		t.Fatal(err)
	}
	r := startSim(t, sc.Name, "")
	s := simDefaults(sc)
	s.StartHz, s.StopHz, s.PerDecade = 1000, 10e3, 5
	s.RefineBudget = 0
	c := r.config(s)
	c.Linger = true
	ch := make(chan Event)
	c.Events = ch
	e, err := New(c)
	if err != nil {
		t.Fatal(err)
	}
	done := make(chan error, 1)
	go func() { done <- e.Run(context.Background()) }()
	measured, phase := 0, 0
	for ev := range ch {
		switch ev := ev.(type) {
		case PointMeasured:
			measured++
			if measured == 2 && phase == 0 {
				e.Pause()
			}
		case StateChanged:
			switch {
			case ev.State == Paused && phase == 0:
				phase = 1
				if r.srv.OutputOn() {
					t.Errorf("simulator output on while paused")
				}
				e.Resume()
			case ev.State == Done && phase == 1:
				phase = 2
				ov := e.Settings()
				ov.Cycles = 50
				if err := e.Remeasure(1, &ov); err != nil {
					t.Error(err)
				}
			case ev.State == Done && phase == 2:
				phase = 3
				if r.srv.OutputOn() {
					t.Errorf("simulator output on after the sweep")
				}
				e.Stop()
			}
		}
	}
	if err := <-done; err != nil {
		t.Fatal(err)
	}
	if phase != 3 {
		t.Fatalf("reached phase %d of 3 (pause, re-measure, stop)", phase)
	}
	if r.srv.OutputOn() {
		t.Errorf("simulator output on after Stop")
	}
	sess := e.Snapshot()
	p := sess.Points[1]
	if len(p.Attempts) < 2 || p.Attempts[len(p.Attempts)-1].Reason != "user" || p.Attempts[len(p.Attempts)-1].Cycles < 50-1e-3 {
		t.Errorf("point 1 lacks the user's 50-cycle re-measure: %d attempts", len(p.Attempts))
	}
}
