package analysis

import (
	"errors"
	"fmt"
	"math"
	"math/cmplx"
)

const (
	// HarmonicFloorDBc is the lowest harmonic level reported, dBc; a
	// harmonic fitted as exactly zero, or not fitted (see Tone.Harmonics),
	// reads this instead of −Inf.
	HarmonicFloorDBc = -200.0
	// SNRCapDB bounds Tone.SNRdB to [−SNRCapDB, SNRCapDB]: a noiseless
	// record (the residual lost in float64 rounding) reads +SNRCapDB, a
	// record with no tone −SNRCapDB, never ±Inf.
	SNRCapDB = 200.0
)

// EstimateTone estimates the tone at f Hz in x sampled every dt seconds.
//
// Rect fits the longest whole-cycle span from the start of the record
// (WholeCycleSpan); Hann fits the whole record under the periodic Hann
// window w[n] = 0.5 − 0.5·cos(2πn/N). The fit is a weighted least-squares
// fit of DC, the tone and its 2nd and 3rd harmonics (those below Nyquist),
// computed from one pass of single-bin DFT sums; over whole cycles it is
// exactly the rectangular single-bin DFT 2/N·Σ x·e^(−j2πf·n·dt), and for
// Hann over many cycles the coherent-gain-0.5 normalisation.
//
// Noise: NoiseRMS = sqrt(σ²), σ² = Σ w·r² / (Σw − p·Σw²/Σw), r the
// residual after removing the p = 1+2K fitted terms (for Rect:
// Σr²/(N−p), unbiased for white noise). SNR is the tone power over the
// noise power in the estimator's bandwidth, ENBW = N·Σw²/(Σw)² bins
// (1 for Rect, 1.5 for Hann; Harris 1978):
//
//	SNR = (A²/2) / (σ²·ENBW/N) = (A²/2)·(Σw)² / (σ²·Σw²)
//
// For Rect this is N·A²/(2σ²), so that the Cramér–Rao bounds for a
// sinusoid of known frequency in white noise (Kay, vol. I: var(Â) ≥
// 2σ²/N, var(φ̂) ≥ 2σ²/(N·A²)) read var(Â)/A² = var(φ̂) = 1/SNR; the
// same holds for the Hann estimate with its own SNR. Hence the standard
// uncertainties σ_A/A ≈ σ_φ ≈ 1/sqrt(SNR) rad for SNR ≫ 1.
//
// Errors: empty record, dt or f not positive and finite, f at or above
// Nyquist (ErrNyquist), less than one cycle (ErrNoCycles), a NaN or
// infinite sample (ErrNonFinite), an invalid clip window, too few samples
// to leave any residual, or a record in which the tone cannot be told
// apart from DC (f extremely close to Nyquist).
func EstimateTone(x []float64, dt, f float64, opt ToneOptions) (Tone, error) {
	t, _, err := estimate(x, nil, dt, f, opt)
	if err != nil {
		return Tone{}, fmt.Errorf("estimate tone at %g Hz: %w", f, err)
	}
	return t, nil
}

// EstimatePair estimates the tone at f Hz on two channels sampled
// together, as EstimateTone does for each, in one pass over both records
// when o1 and o2 select the same window (with different windows the two
// channels are estimated one after the other). x1 and x2 must have the
// same length; the phases of both are referred to the same first sample.
func EstimatePair(x1, x2 []float64, dt, f float64, o1, o2 ToneOptions) (Tone, Tone, error) {
	if len(x1) != len(x2) {
		return Tone{}, Tone{}, fmt.Errorf("estimate pair at %g Hz: channel lengths differ: %d and %d samples", f, len(x1), len(x2))
	}
	if o1.Window != o2.Window || o1.SkipHarmonics != o2.SkipHarmonics {
		t1, err := EstimateTone(x1, dt, f, o1)
		if err != nil {
			return Tone{}, Tone{}, fmt.Errorf("channel 1: %w", err)
		}
		t2, err := EstimateTone(x2, dt, f, o2)
		if err != nil {
			return Tone{}, Tone{}, fmt.Errorf("channel 2: %w", err)
		}
		return t1, t2, nil
	}
	if len(x2) == 0 {
		return Tone{}, Tone{}, fmt.Errorf("estimate pair at %g Hz: empty record", f)
	}
	t1, t2, err := estimate(x1, x2, dt, f, o1)
	if err != nil {
		return Tone{}, Tone{}, fmt.Errorf("estimate pair at %g Hz: %w", f, err)
	}
	if err := clipCheck(&t2, x2, o2); err != nil {
		return Tone{}, Tone{}, fmt.Errorf("estimate pair at %g Hz: channel 2: %w", f, err)
	}
	return t1, t2, nil
}

// estimate does the work of both entry points; x2 may be nil. The clip
// check of x2 is left to the caller (its options may differ).
func estimate(x1, x2 []float64, dt, f float64, opt ToneOptions) (Tone, Tone, error) {
	n := len(x1)
	if err := checkRecord(n, dt, f); err != nil {
		return Tone{}, Tone{}, err
	}
	if opt.Window != Rect && opt.Window != Hann {
		return Tone{}, Tone{}, fmt.Errorf("unknown window %d", int(opt.Window))
	}
	r := f * dt
	hann := opt.Window == Hann
	span := n
	if hann {
		if float64(n)*r < 1-spanTolCycles {
			return Tone{}, Tone{}, fmt.Errorf("%d samples at %g s hold %.3g cycles: %w", n, dt, float64(n)*r, ErrNoCycles)
		}
	} else {
		m, err := WholeCycleSpan(n, dt, f)
		if err != nil {
			return Tone{}, Tone{}, err
		}
		span = m
	}
	// Harmonics fitted: those strictly below Nyquist, and only while the
	// record leaves residual degrees of freedom for the noise.
	k := 1
	if !opt.SkipHarmonics {
		for k < 3 && float64(k+1)*r < 0.5 {
			k++
		}
	}
	for k > 1 && span <= 1+2*k {
		k--
	}
	if span <= 3 {
		return Tone{}, Tone{}, fmt.Errorf("%d samples leave no residual to estimate noise (need at least 4)", span)
	}
	kk := 1
	if k > 1 {
		kk = 3
	}
	// Shifting by the first sample keeps Σx² from being dominated by a
	// large DC level, which would cost precision in the residual.
	o1, o2 := x1[0], 0.0
	if x2 != nil {
		o2 = x2[0]
	}
	if !finite(o1) || !finite(o2) {
		o1, o2 = 0, 0 // the scan below names the bad sample
	}
	a1, a2 := accumulate(x1, x2, span, r, kk, hann, o1, o2)
	if err := scanFinite(x1, a1.finite(), span, "channel 1"); err != nil {
		return Tone{}, Tone{}, err
	}
	if x2 != nil {
		if err := scanFinite(x2, a2.finite(), span, "channel 2"); err != nil {
			return Tone{}, Tone{}, err
		}
	}
	// The Gram matrix; drop harmonics if they make it singular.
	var l []float64
	for ; k >= 1; k-- {
		l = gram(r, span, k, hann)
		if cholesky(l, 1+2*k) == nil {
			break
		}
		if k == 1 {
			return Tone{}, Tone{}, fmt.Errorf("%g cycles per sample over %d samples: %w", r, span, errSingular)
		}
	}
	sw, sw2 := windowMoments(span, hann)
	p := float64(1 + 2*k)
	dof := sw - p*sw2/sw
	if !(dof > 0) {
		return Tone{}, Tone{}, fmt.Errorf("%d samples leave no residual to estimate noise", span)
	}
	mk := func(s *sums, off float64) Tone {
		fr := fit(s, l, k)
		return makeTone(fr, off, f, r, span, k, sw, sw2, dof)
	}
	t1 := mk(&a1, o1)
	if err := clipCheck(&t1, x1, opt); err != nil {
		return Tone{}, Tone{}, fmt.Errorf("channel 1: %w", err)
	}
	var t2 Tone
	if x2 != nil {
		t2 = mk(&a2, o2)
	}
	return t1, t2, nil
}

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

// allFinite reports whether every value of x is finite: v − v is 0 for a
// finite v and NaN for NaN or ±Inf, and a NaN stays NaN through the sums.
func allFinite(x []float64) bool {
	var a, b float64
	i := 0
	for ; i+1 < len(x); i += 2 {
		a += x[i] - x[i]
		b += x[i+1] - x[i+1]
	}
	if i < len(x) {
		a += x[i] - x[i]
	}
	return a+b == 0
}

// scanFinite checks every sample of x: the span when its sums came out
// non-finite, and always the tail past the span, which the sums skip.
func scanFinite(x []float64, sumsOK bool, span int, name string) error {
	from := span
	if !sumsOK {
		from = 0
	} else if allFinite(x[span:]) {
		return nil
	}
	for i := from; i < len(x); i++ {
		if !finite(x[i]) {
			return fmt.Errorf("%s sample %d is %g: %w", name, i, x[i], ErrNonFinite)
		}
	}
	if !sumsOK {
		return fmt.Errorf("%s: samples too large, sums overflow: %w", name, ErrNonFinite)
	}
	return nil
}

var errClipWindow = errors.New("clip window needs ClipLow < ClipHigh, or both zero to disable")

// clipCheck sets t.Clipped when a sample of x sits at or beyond the clip
// window of opt.
func clipCheck(t *Tone, x []float64, opt ToneOptions) error {
	lo, hi := opt.ClipLow, opt.ClipHigh
	if lo == 0 && hi == 0 {
		return nil
	}
	if !(lo < hi) || !finite(lo) || !finite(hi) {
		return fmt.Errorf("clip window %g V to %g V: %w", lo, hi, errClipWindow)
	}
	for _, v := range x {
		if v >= hi || v <= lo {
			t.Clipped = true
			return nil
		}
	}
	return nil
}

func makeTone(fr fitResult, off, f, r float64, span, k int, sw, sw2, dof float64) Tone {
	ph := fr.ph[0]
	amp := cmplx.Abs(ph)
	t := Tone{
		FreqHz:    f,
		Phasor:    ph,
		AmpPeak:   amp,
		PhaseRad:  phaseRad(ph),
		DC:        fr.dc + off,
		N:         span,
		Cycles:    float64(span) * r,
		Harmonics: k,
		H2dBc:     HarmonicFloorDBc,
		H3dBc:     HarmonicFloorDBc,
	}
	sigma2 := fr.resid / dof
	t.NoiseRMS = math.Sqrt(sigma2)
	switch {
	case amp == 0:
		t.SNRdB = -SNRCapDB
	case sigma2 == 0:
		t.SNRdB = SNRCapDB
	default:
		snr := amp * amp / 2 * sw * sw / (sigma2 * sw2)
		t.SNRdB = math.Max(-SNRCapDB, math.Min(SNRCapDB, 10*math.Log10(snr)))
	}
	dbc := func(h complex128) float64 {
		a := cmplx.Abs(h)
		if a == 0 {
			return HarmonicFloorDBc
		}
		if amp == 0 {
			return -HarmonicFloorDBc
		}
		return math.Max(HarmonicFloorDBc, math.Min(-HarmonicFloorDBc, DBFromRatio(a/amp)))
	}
	if k >= 2 {
		t.H2dBc = dbc(fr.ph[1])
	}
	if k >= 3 {
		t.H3dBc = dbc(fr.ph[2])
	}
	return t
}

// phaseRad returns angle(z) in (−π, π].
func phaseRad(z complex128) float64 {
	p := cmplx.Phase(z)
	if p == -math.Pi {
		p = math.Pi
	}
	return p
}

// snrLinear returns the linear SNR of a tone, from its SNRdB.
func snrLinear(t Tone) float64 { return math.Pow(10, t.SNRdB/10) }
