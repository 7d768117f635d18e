package analysis

import (
	"errors"
	"fmt"
	"math"
)

// Sentinel errors that callers test with errors.Is.
var (
	// ErrNoCycles: the record holds less than one cycle of the tone.
	ErrNoCycles = errors.New("record holds less than one cycle of the tone")
	// ErrNyquist: the tone is at or above half the sample rate.
	ErrNyquist = errors.New("frequency at or above the Nyquist frequency")
	// ErrNonFinite: a sample or value is NaN or infinite.
	ErrNonFinite = errors.New("value is NaN or infinite")
)

// spanTolCycles is how far, in cycles, a span may be from a whole number
// of cycles and still count as whole (capped at half a sample, so that
// for long cycles exactly the nearest-sample span counts). Half a sample
// of rounding is within it whenever a cycle has at least 500 samples. The tone fit solves the
// small DC and image cross terms exactly, so a span this close to whole is
// unbiased and within a negligible margin of the efficient whole-cycle
// DFT; the tolerance only decides how far back WholeCycleSpan searches.
const spanTolCycles = 1e-3

// maxSpanSearch bounds the cycle counts WholeCycleSpan tries.
const maxSpanSearch = 1 << 14

// checkRecord validates the sample count, sample interval and tone
// frequency shared by every estimator.
func checkRecord(n int, dt, f float64) error {
	if n < 1 {
		return errors.New("empty record")
	}
	if math.IsNaN(dt) || math.IsInf(dt, 0) || dt <= 0 {
		return fmt.Errorf("sample interval %g s must be positive and finite", dt)
	}
	if math.IsNaN(f) || math.IsInf(f, 0) || f <= 0 {
		return fmt.Errorf("frequency %g Hz must be positive and finite", f)
	}
	if f*dt >= 0.5 {
		return fmt.Errorf("frequency %g Hz, Nyquist %g Hz: %w", f, 0.5/dt, ErrNyquist)
	}
	return nil
}

// WholeCycleSpan returns the largest m ≤ n such that m samples taken every
// dt seconds hold a whole number k ≥ 1 of cycles of f Hz, within 1e-3
// cycle and half a sample: |m·dt·f − k| ≤ min(1e-3, dt·f/2). When the samples per cycle are not a
// rational number with a small denominator no span may be that close; the
// search then tries cycle counts from the most that fit down to half of
// them (at most 16384 counts) and returns the span of at least one cycle
// with the smallest distance from whole, the longest on a tie. The error wraps ErrNoCycles
// when n samples hold less than one cycle, ErrNyquist when f ≥ 1/(2·dt).
func WholeCycleSpan(n int, dt, f float64) (int, error) {
	if err := checkRecord(n, dt, f); err != nil {
		return 0, fmt.Errorf("whole-cycle span of %d samples: %w", n, err)
	}
	r := f * dt // cycles per sample
	c := float64(n) * r
	if c < 1-spanTolCycles {
		return 0, fmt.Errorf("whole-cycle span: %d samples at %g s hold %.3g cycles of %g Hz: %w", n, dt, c, f, ErrNoCycles)
	}
	kmax := int(math.Floor(c + spanTolCycles))
	kmin := max(1, kmax/2, kmax-maxSpanSearch)
	// distance of m samples from a whole number (≥ 1) of cycles; spans
	// under one cycle do not qualify
	dist := func(m int) float64 {
		mc := float64(m) * r
		if mc < 1-spanTolCycles {
			return math.Inf(1)
		}
		return math.Abs(mc - math.Max(1, math.Round(mc)))
	}
	// within 1e-3 cycle and half a sample: when a cycle is longer than
	// 500 samples only the nearest-sample span of each cycle count fits
	tol := math.Min(spanTolCycles, r/2)
	bestM, bestRes := n, dist(n)
	if bestRes <= tol {
		return n, nil
	}
	for k := kmax; k >= kmin; k-- {
		lo := int(math.Floor(float64(k) / r))
		for _, m := range [2]int{lo + 1, lo} { // the longer first
			if m < 1 || m > n {
				continue
			}
			res := dist(m)
			if res <= tol {
				return m, nil
			}
			if res < bestRes {
				bestM, bestRes = m, res
			}
		}
	}
	return bestM, nil
}
