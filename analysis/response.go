package analysis

import (
	"math"
	"math/cmplx"
)

// LoopGain returns the loop gain measured by voltage injection,
// L = −ret.Phasor/inj.Phasor, where inj is channel 1 on the injection side
// (the node x driving the loop) and ret is channel 2 on the return side
// (node y); Middlebrook 1975 (memory). The minus sign is the control
// convention: the phase margin is 180° + angle(L) where |L| = 1.
//
// Uncertainties come from the two tones' SNRs (see EstimateTone): each
// channel contributes a relative amplitude variance and a phase variance
// of 1/SNR, independent between channels, so
//
//	σ(|L|)/|L| = σ(angle L) = sqrt(1/SNR₁ + 1/SNR₂)
//
// GainSigmaDB = 20/ln(10)·σ(|L|)/|L|, PhaseSigmaDeg = σ(angle L) in
// degrees. These are small-noise formulas (SNR ≫ 1); PhaseSigmaDeg is
// capped at 180°, meaning the phase is unknown. When inj has zero
// amplitude the ratio is undefined and H, GainDB and PhaseDeg are NaN.
func LoopGain(inj, ret Tone) Response {
	r := ratio(inj, ret)
	if !math.IsNaN(real(r.H)) {
		r.H = -r.H
		r.PhaseDeg = phaseDeg(r.H)
	}
	return r
}

// Ratio returns the transfer H = out.Phasor/in.Phasor with the same
// uncertainties and conventions as LoopGain (no sign change).
func Ratio(in, out Tone) Response { return ratio(in, out) }

func ratio(in, out Tone) Response {
	r := Response{FreqHz: in.FreqHz}
	rel := math.Sqrt(1/snrLinear(in) + 1/snrLinear(out))
	r.GainSigmaDB = 20 / math.Ln10 * rel
	r.PhaseSigmaDeg = math.Min(rel, math.Pi) * 180 / math.Pi
	if in.Phasor == 0 || cmplx.IsNaN(in.Phasor) || cmplx.IsNaN(out.Phasor) {
		nan := math.NaN()
		r.H = complex(nan, nan)
		r.GainDB, r.PhaseDeg = nan, nan
		return r
	}
	r.H = out.Phasor / in.Phasor
	r.GainDB = DBFromRatio(cmplx.Abs(r.H))
	r.PhaseDeg = phaseDeg(r.H)
	return r
}
