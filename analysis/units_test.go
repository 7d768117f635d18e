package analysis

import (
	"math"
	"math/cmplx"
	"testing"
)

func TestWrapDeg(t *testing.T) {
	// the (−180, 180] convention of api.go
	cases := []struct{ in, want float64 }{
		{0, 0}, {180, 180}, {-180, 180}, {190, -170}, {-190, 170},
		{540, 180}, {-360, 0}, {359, -1}, {-719, 1}, {1e6, 1e6 - 2778*360},
	}
	for _, c := range cases {
		if got := WrapDeg(c.in); !near(got, c.want, 1e-9) {
			t.Errorf("WrapDeg(%g) = %g, want %g", c.in, got, c.want)
		}
	}
	if !math.IsNaN(WrapDeg(math.NaN())) || !math.IsNaN(WrapDeg(math.Inf(1))) {
		t.Error("non-finite input must give NaN")
	}
}

func TestUnwrapDeg(t *testing.T) {
	// a phase falling 25° a step from −10°, read wrapped as an instrument
	// reports it, must come back exactly
	var truth, wrapped []float64
	for i := 0; i < 60; i++ {
		p := -10 - 25*float64(i)
		truth = append(truth, p)
		wrapped = append(wrapped, WrapDeg(p))
	}
	got := UnwrapDeg(wrapped)
	for i := range truth {
		if !near(got[i], truth[i], 1e-9) {
			t.Fatalf("point %d: %g, want %g", i, got[i], truth[i])
		}
	}
	// anchored: the first point is wrapped into (−180, 180]
	if got := UnwrapDeg([]float64{370, 20, 200}); !near(got[0], 10, 1e-12) || !near(got[1], 20, 1e-12) || !near(got[2], 200, 1e-12) {
		t.Errorf("anchoring: %v", got)
	}
	// NaN is kept and skipped
	if got := UnwrapDeg([]float64{170, math.NaN(), -170}); !math.IsNaN(got[1]) || !near(got[2], 190, 1e-12) {
		t.Errorf("NaN: %v", got)
	}
	if got := UnwrapDeg(nil); got == nil || len(got) != 0 {
		t.Errorf("empty: %v", got)
	}
}

func TestDecibels(t *testing.T) {
	// closed form: 20·log10(2) = 6.0206 dB, 20·log10(√2) = 3.0103 dB
	if !near(DBFromRatio(2), 6.0206, 1e-4) || !near(DBFromRatio(math.Sqrt2), 3.0103, 1e-4) || DBFromRatio(10) != 20 {
		t.Error("DBFromRatio")
	}
	if !near(RatioFromDB(-6.0206), 0.5, 1e-5) || !near(RatioFromDB(DBFromRatio(0.123)), 0.123, 1e-15) {
		t.Error("RatioFromDB")
	}
}

func TestClosedLoopAndSensitivity(t *testing.T) {
	// S + T = 1 for every L (closed form), and L = 1 gives T = S = 1/2
	for _, l := range []complex128{1, -0.5, complex(3, -4), complex(0, 1e-3)} {
		if cmplx.Abs(ClosedLoop(l)+Sensitivity(l)-1) > 1e-12 {
			t.Errorf("S+T ≠ 1 at L = %v", l)
		}
	}
	if ClosedLoop(1) != 0.5 || Sensitivity(1) != 0.5 {
		t.Error("L = 1")
	}
}

func TestOvershootFromPM(t *testing.T) {
	// ζ → PM by the closed form of Ogata / Franklin-Powell-Emami-Naeini
	// (memory); overshoot exp(−πζ/√(1−ζ²)): ζ = 0.5 gives 16.3 %,
	// ζ = 0.7 gives 4.6 % (the textbook figures, memory).
	for _, c := range []struct{ zeta, os float64 }{{0.5, 0.163}, {0.7, 0.046}, {0.2, 0.527}} {
		wc := math.Sqrt(math.Sqrt(1+4*math.Pow(c.zeta, 4)) - 2*c.zeta*c.zeta)
		pm := math.Atan(2*c.zeta/wc) * 180 / math.Pi
		os, err := OvershootFromPM(pm)
		if err != nil || !near(os, c.os, 0.001) {
			t.Errorf("ζ=%g (PM %.3f°): overshoot %g, want %g (%v)", c.zeta, pm, os, c.os, err)
		}
	}
	// the rule of thumb PM ≈ 100·ζ (common practice): ζ = 0.5 is 51.8°
	if !near(secondOrderPMDeg(0.5), 51.83, 0.01) {
		t.Errorf("PM(ζ=0.5) = %g", secondOrderPMDeg(0.5))
	}
	if os, err := OvershootFromPM(80); err != nil || os != 0 { // ζ > 1
		t.Errorf("PM 80°: %g %v", os, err)
	}
	if os, err := OvershootFromPM(95); err != nil || os != 0 {
		t.Errorf("PM 95°: %g %v", os, err)
	}
	for _, bad := range []float64{0, -10, math.NaN(), math.Inf(1)} {
		if _, err := OvershootFromPM(bad); err == nil {
			t.Errorf("PM %g: no error", bad)
		}
	}
}

func TestLoopGainAndRatio(t *testing.T) {
	inj := Tone{FreqHz: 1000, Phasor: 1, SNRdB: 60}
	ret := Tone{FreqHz: 1000, Phasor: -0.5, SNRdB: 60}
	// L = −ret/inj = 0.5: −6.0206 dB, 0°; σ = sqrt(2·1e-6) rad
	l := LoopGain(inj, ret)
	if !near(l.GainDB, -6.0206, 1e-4) || !near(l.PhaseDeg, 0, 1e-12) || l.FreqHz != 1000 {
		t.Errorf("loop gain %+v", l)
	}
	if !near(l.PhaseSigmaDeg, math.Sqrt(2e-6)*180/math.Pi, 1e-9) || !near(l.GainSigmaDB, 20/math.Ln10*math.Sqrt(2e-6), 1e-9) {
		t.Errorf("sigmas %g dB %g°", l.GainSigmaDB, l.PhaseSigmaDeg)
	}
	h := Ratio(inj, ret) // −0.5: 180°, never −180°
	if !near(h.GainDB, -6.0206, 1e-4) || h.PhaseDeg != 180 {
		t.Errorf("ratio %+v", h)
	}
	z := LoopGain(Tone{}, ret)
	if !math.IsNaN(z.GainDB) || !math.IsNaN(z.PhaseDeg) {
		t.Errorf("zero injection: %+v", z)
	}
	noisy := LoopGain(Tone{Phasor: 1, SNRdB: -SNRCapDB}, ret)
	if noisy.PhaseSigmaDeg != 180 || math.IsInf(noisy.GainSigmaDB, 0) {
		t.Errorf("no-signal sigmas %g dB %g°", noisy.GainSigmaDB, noisy.PhaseSigmaDeg)
	}
}
