package analysis

// This file fixes the package's exported contract that sweep, sim, tui and
// cmd build on. Owners may add fields and functions; renaming or removing
// needs every caller updated in the same commit.

// Window selects the taper applied before the single-bin DFT.
type Window int

const (
	// Rect is the rectangular window: the efficient estimator when the
	// record holds a whole number of cycles (coherent gain 1, ENBW 1 bin;
	// Harris 1978).
	Rect Window = iota
	// Hann is the raised-cosine window for records that are not whole
	// cycles (coherent gain 0.5, ENBW 1.5 bins; Harris 1978).
	Hann
)

// ToneOptions are the settings for estimating one tone. The zero value
// means: rectangular window, no clip check.
type ToneOptions struct {
	Window Window
	// ClipLow and ClipHigh are the channel's input window limits in volts.
	// A sample at or beyond either marks the tone Clipped. Both zero
	// disables the check.
	ClipLow, ClipHigh float64
	// SkipHarmonics leaves the 2nd and 3rd harmonics out of the fit
	// (faster; their energy then counts as noise). The zero value fits
	// them.
	SkipHarmonics bool
}

// Tone is the estimate of one sinusoid of known frequency in a record:
// x[n] ≈ DC + AmpPeak·cos(2π·FreqHz·n·dt + PhaseRad) + noise.
type Tone struct {
	FreqHz   float64
	Phasor   complex128 // AmpPeak·exp(j·PhaseRad), volts peak; phase referred to the first sample
	AmpPeak  float64    // volts peak
	PhaseRad float64    // radians, in (−π, π]
	DC       float64    // volts, fitted offset (the mean of the span over whole cycles)
	// NoiseRMS is the rms of the residual after removing DC and the fitted
	// tone (and its 2nd and 3rd harmonics), volts, over the record's
	// full bandwidth.
	NoiseRMS float64
	// SNRdB is the tone's power over the noise power in the estimator's
	// bandwidth (ENBW of the window over the span), in dB.
	SNRdB float64
	// H2dBc and H3dBc are the 2nd and 3rd harmonic amplitudes relative to
	// the fundamental, dB (negative: below the carrier).
	H2dBc, H3dBc float64
	Clipped      bool
	N            int     // samples used (the whole-cycle span for Rect)
	Cycles       float64 // cycles of FreqHz in the span used
	// Harmonics is the highest harmonic order fitted: 3, or less when 2f
	// or 3f is at or above Nyquist or SkipHarmonics is set. H2dBc and
	// H3dBc of a harmonic not fitted read HarmonicFloorDBc.
	Harmonics int
}

// Response is one point of a measured frequency response.
type Response struct {
	FreqHz        float64
	H             complex128 // the complex ratio (loop gain L or transfer H)
	GainDB        float64    // 20·log10|H|
	PhaseDeg      float64    // angle(H) in degrees, wrapped to (−180, 180]
	GainSigmaDB   float64    // standard uncertainty of GainDB
	PhaseSigmaDeg float64    // standard uncertainty of PhaseDeg
}

// Point is a measured loop-gain sample used for margins; PhaseDeg may be
// unwrapped (any multiple of 360° offset).
type Point struct {
	FreqHz        float64
	GainDB        float64
	PhaseDeg      float64
	GainSigmaDB   float64
	PhaseSigmaDeg float64
}

// Reach says why a margin has no number: its crossing lies outside the
// swept band.
type Reach int

const (
	Reached   Reach = iota // at least one crossing inside the band
	BelowBand              // the crossing lies below the lowest frequency swept
	AboveBand              // the crossing lies above the highest frequency swept
	NotFound               // no crossing and no sign of one on either side
)

// GainCrossover is a frequency where |L| = 1 (0 dB).
type GainCrossover struct {
	FreqHz         float64
	PhaseMarginDeg float64 // 180° + angle(L), wrapped to (−180, 180]
	SigmaDeg       float64 // standard uncertainty of the phase margin
	SigmaFreqHz    float64 // standard uncertainty of the crossover frequency
	DelayMarginS   float64 // PM in radians / ω at crossover; 0 when PM ≤ 0
}

// PhaseCrossover is a frequency where angle(L) = −180° + k·360°.
type PhaseCrossover struct {
	FreqHz       float64
	GainMarginDB float64 // −gain in dB at the crossing
	SigmaDB      float64
	SigmaFreqHz  float64
}

// Margins summarises the stability margins of a measured loop gain.
type Margins struct {
	GainCrossovers  []GainCrossover
	PhaseCrossovers []PhaseCrossover
	// WorstPM and WorstGM index the crossing with the smallest margin, or
	// −1 when there is none.
	WorstPM, WorstGM int
	// GainReach and PhaseReach say where the missing crossing lies when
	// the corresponding slice is empty.
	GainReach, PhaseReach Reach
	// ModulusMargin is min |1+L| over the swept points (interpolated),
	// at ModulusFreqHz; Ms = 1/ModulusMargin is the sensitivity peak.
	ModulusMargin float64
	ModulusFreqHz float64
	// ModulusSigma is the standard uncertainty of ModulusMargin, propagated
	// to first order from the gain and phase uncertainties of the points
	// the interpolant at ModulusFreqHz is built on.
	ModulusSigma float64
}
