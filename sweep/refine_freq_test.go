package sweep

import (
	"math"
	"testing"

	"loopsweep/analysis"
)

func TestCrossingFreqSigmaRelClosedForm(t *testing.T) {
	// Phase on a straight line in ln f: φ = −180° − 50°·ln(f/f*), σ 0.5°
	// at every point, points at ln(f/f*) = ±0.1 (the bracket) and ±0.2
	// (inside the ±0.1-decade span). By hand: Sxx = Σx²/σ² = 0.1/0.25 =
	// 0.4, so the slope's σ is 1/√0.4 and σ(f)/f = 0.5/(50 − 1/√0.4).
	const fx, b, sig = 1000.0, -50.0, 0.5
	var pts []analysis.Point
	for _, x := range []float64{-0.2, -0.1, 0.1, 0.2} {
		pts = append(pts, analysis.Point{FreqHz: fx * math.Exp(x), PhaseDeg: -180 + b*x, GainDB: -30, GainSigmaDB: 0.1, PhaseSigmaDeg: sig})
	}
	rel, lo := crossingFreqSigmaRel(pts, fx, true)
	want := sig / (50 - 1/math.Sqrt(0.4))
	if lo != 1 || math.Abs(rel/want-1) > 1e-12 {
		t.Errorf("σ(f)/f = %.6g (bracket %d), want %.6g (bracket 1)", rel, lo, want)
	}
	// The same points with a 50° scatter: the slope's σ, 50/√0.4 = 79°
	// per neper, exceeds the slope, which is then not resolved.
	for i := range pts {
		pts[i].PhaseSigmaDeg = 50
	}
	if rel, _ := crossingFreqSigmaRel(pts, fx, true); !math.IsInf(rel, 1) {
		t.Errorf("slope within its own scatter: σ(f)/f = %g, want +Inf", rel)
	}
	if _, lo := crossingFreqSigmaRel(pts, 2*fx, true); lo != -1 {
		t.Errorf("crossing outside the curve: bracket %d, want -1", lo)
	}
}

// TestRefinementNarrowsCrossingFrequency: a weak return tone at the
// phase crossover (|L| = K/6 = −29.5 dB) and a record limit that the
// plan's cycles already fill leave the phase crossover's frequency a few
// tenths of a percent uncertain; refinement must bring σ(f)/f below its
// target (refineFreqRel), raising the injection within MaxAmpVpp where
// the longest record is not enough, and the crossing must then agree
// with the closed form.
func TestRefinementNarrowsCrossingFrequency(t *testing.T) {
	// Closed form (REFERENCES, control theory): L = K/(u(u+1)(u+2)) has
	// its phase crossover at u = j√2, f = √2·f0, where GM = 6/K.
	const K, f0 = 0.2, 5000.0
	fpc := math.Sqrt2 * f0
	sweep := func(budget int) (*fakeBench, Session, analysis.PhaseCrossover) {
		r := newRig(t, injLoop3(K, f0))
		r.cfg.Settings.StopHz = 20e3
		r.cfg.Settings.RefineBudget = budget
		r.cfg.MaxPoints = 32768 // 1600 cycles at 20 samples per cycle
		_, s := r.run(t)
		m, err := s.Margins()
		if err != nil {
			t.Fatal(err)
		}
		if len(m.PhaseCrossovers) == 0 {
			t.Fatalf("budget %d: no phase crossover measured", budget)
		}
		return r.bench, s, m.PhaseCrossovers[m.WorstGM]
	}
	relOf := func(s Session, p analysis.PhaseCrossover) float64 {
		rel, _ := crossingFreqSigmaRel(s.Curve(), p.FreqHz, true)
		return math.Max(rel, p.SigmaFreqHz/p.FreqHz)
	}

	_, s0, p0 := sweep(0)
	if rel := relOf(s0, p0); rel <= refineFreqRel {
		t.Fatalf("without refinement σ(f)/f = %.3g%% already meets the %.3g%% target: the case tests nothing", 100*rel, 100*refineFreqRel)
	}
	b, s, p := sweep(Defaults().RefineBudget)
	rel := relOf(s, p)
	if rel > refineFreqRel {
		t.Errorf("after refinement σ(f)/f = %.3g%%, target %.3g%%", 100*rel, 100*refineFreqRel)
	}
	// 4σ of the target: a 1-in-16 000 chance for a Gaussian error.
	if d := math.Abs(p.FreqHz/fpc - 1); d > 4*refineFreqRel {
		t.Errorf("phase crossover %.5g Hz, closed form %.5g Hz (%.3f%%)", p.FreqHz, fpc, 100*d)
	}
	if b.maxAmpSet > s.Settings.MaxAmpVpp {
		t.Errorf("injection reached %g Vpp, cap %g Vpp", b.maxAmpSet, s.Settings.MaxAmpVpp)
	}
	raised := false
	for _, pt := range s.Points {
		for _, a := range pt.Attempts {
			raised = raised || (a.Reason == "refine" && a.AmpVpp > s.Settings.AmpVpp)
			// Both nodes' tones stay within the cap (2·peak ≤ MaxAmpVpp),
			// with 1% for the fit's scatter.
			if pk := math.Max(a.Ch1.AmpPeakV, a.Ch2.AmpPeakV); a.AmpVpp > s.Settings.AmpVpp && 2*pk > 1.01*s.Settings.MaxAmpVpp {
				t.Errorf("%g Hz at %g Vpp: a node swings %g Vpp, above the %g Vpp cap", a.Tone(pt.FreqHz), a.AmpVpp, 2*pk, s.Settings.MaxAmpVpp)
			}
		}
	}
	if !raised {
		t.Errorf("no refinement attempt raised the injection above %g Vpp, though the record limit caps the cycles", s.Settings.AmpVpp)
	}
	t.Logf("phase crossover %.5g Hz (closed form %.5g): σ(f)/f %.3g%% without refinement, %.3g%% with", p.FreqHz, fpc, 100*relOf(s0, p0), 100*rel)
}
