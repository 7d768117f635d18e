package sweep

import (
	"math"
	"testing"
)

// TestFirstAttemptSizedForSNR: with white noise at which the plan's
// Cycles would give about 22 dB, below MinSNRdB = 25 dB, each point's
// first attempt already takes the cycles the SNR threshold asks for and
// passes, with no retry. The first point predicts from its ranging
// records, the second from the first point's SNR per cycle.
func TestFirstAttemptSizedForSNR(t *testing.T) {
	const (
		snrAtCyclesDB = 22.0
		marginDB      = 3.0 // the margin the Settings doc states
	)
	// |L| = 1 everywhere: x = v_z/(1+L), y = −L·x (voltage injection,
	// Middlebrook 1975), so both probed tones are v_z/2 peak, v_z the
	// injection's peak (AmpVpp/2).
	r := newRig(t, func(float64) complex128 { return 1 })
	s := Defaults()
	s.Frequencies = []float64{200, 250}
	s.RefineBudget = 0
	r.cfg.Settings = s
	amp := s.AmpVpp / 2 / 2
	// The rectangular fit's SNR over N samples is N·A²/(2σ²) (Kay,
	// vol. I; analysis). At 200 Hz and 250 Hz the 10 ns timebase holds
	// MinPerCycle samples per cycle exactly (250 µs, 200 µs), so Cycles
	// give N = Cycles·MinPerCycle; choose σ for snrAtCyclesDB there.
	n := float64(s.Cycles * s.MinPerCycle)
	// A digitizer whose smallest range is 50 mV: the ranging records
	// learn the DC level at the initial 20 V, then hold the tone and
	// its noise (3·A + 6σ ≈ 39 mV) in the next window.
	r.cfg.MinRangeV = 0.05
	r.bench.noiseV = amp * math.Sqrt(n/(2*math.Pow(10, snrAtCyclesDB/10)))
	// White noise: SNR grows as 10·log10 of the record length, so the
	// closed form for the cycles that reach MinSNRdB + margin is:
	want := math.Ceil(float64(s.Cycles) * math.Pow(10, (s.MinSNRdB+marginDB-snrAtCyclesDB)/10))
	_, sess := r.run(t)
	for i, p := range sess.Points {
		if len(p.Attempts) != 1 {
			t.Errorf("%g Hz: %d attempts, want 1 (no retry)", p.FreqHz, len(p.Attempts))
			for _, a := range p.Attempts {
				t.Logf("  cycles %g SNR %.1f/%.1f dB %q", a.Cycles, a.Ch1.SNRdB, a.Ch2.SNRdB, a.Problem)
			}
			continue
		}
		a := p.Attempts[0]
		snr := math.Min(a.Ch1.SNRdB, a.Ch2.SNRdB)
		t.Logf("%g Hz: %g cycles (closed form %g), SNR %.1f dB", p.FreqHz, a.Cycles, want, snr)
		if a.Problem != "" || snr < s.MinSNRdB {
			t.Errorf("%g Hz: first attempt SNR %.1f dB (%q), want ≥ %g dB", p.FreqHz, snr, a.Problem, s.MinSNRdB)
		}
		if a.Cycles < float64(s.Cycles) {
			t.Errorf("%g Hz: %g cycles, fewer than Cycles = %d", p.FreqHz, a.Cycles, s.Cycles)
		}
		// The first point's prediction comes from 2-cycle ranging records
		// (40 samples under Hann: σ² and A² each known to about ±1.5 dB),
		// the second's from the first point's full record (±0.5 dB).
		tolDB := 3.0
		if i > 0 {
			tolDB = 1.0
		}
		if lo, hi := want*math.Pow(10, -tolDB/10), want*math.Pow(10, tolDB/10)+1; a.Cycles < lo || a.Cycles > hi {
			t.Errorf("%g Hz: %g cycles, want the closed form %g within %g dB [%.1f, %.1f]", p.FreqHz, a.Cycles, want, tolDB, lo, hi)
		}
		if p.Flagged {
			t.Errorf("%g Hz: flagged %q", p.FreqHz, p.Flag)
		}
	}
}
