package analysis

import (
	"errors"
	"fmt"
	"math"
	"math/cmplx"
)

// DBFromRatio returns 20·log10(r), the level in dB of an amplitude ratio r.
// r = 0 gives −Inf; callers that store the value clamp it.
func DBFromRatio(r float64) float64 { return 20 * math.Log10(r) }

// RatioFromDB returns 10^(db/20), the amplitude ratio of a level in dB.
func RatioFromDB(db float64) float64 { return math.Pow(10, db/20) }

// WrapDeg wraps an angle in degrees into (−180, 180]. NaN and ±Inf give
// NaN.
func WrapDeg(deg float64) float64 {
	if math.IsNaN(deg) || math.IsInf(deg, 0) {
		return math.NaN()
	}
	w := math.Mod(deg, 360) // in (−360, 360), sign of deg
	switch {
	case w > 180:
		w -= 360
	case w <= -180:
		w += 360
	}
	return w
}

// UnwrapDeg returns a continuous copy of phases in degrees: each value is
// moved by a multiple of 360° so that it lies within 180° of the previous
// finite one. The first finite value is wrapped into (−180, 180] and
// anchors the curve, so the low-frequency end of a sweep sorted by
// frequency sits in its natural range (0° for a flat response, −90° for an
// integrator). NaN entries are kept as NaN and skipped. phases is not
// modified; an empty input gives an empty slice.
func UnwrapDeg(phases []float64) []float64 {
	out := make([]float64, len(phases))
	prev, have := 0.0, false
	for i, p := range phases {
		if math.IsNaN(p) || math.IsInf(p, 0) {
			out[i] = math.NaN()
			continue
		}
		if !have {
			out[i] = WrapDeg(p)
			prev, have = out[i], true
			continue
		}
		q := prev + WrapDeg(p-prev)
		out[i] = q
		prev = q
	}
	return out
}

// ClosedLoop returns the complementary sensitivity T = L/(1+L) of a
// loop gain L (unity negative feedback).
func ClosedLoop(L complex128) complex128 { return L / (1 + L) }

// Sensitivity returns S = 1/(1+L) of a loop gain L (unity negative
// feedback). max|S| over frequency is the sensitivity peak Ms, the inverse
// of the modulus margin.
func Sensitivity(L complex128) complex128 { return 1 / (1 + L) }

// errBadPM is returned by OvershootFromPM for a margin with no stable
// second-order equivalent.
var errBadPM = errors.New("phase margin must be finite and above 0°")

// secondOrderPMDeg is the phase margin in degrees of the loop
// ωn²/(s(s+2ζωn)): ωc/ωn = sqrt(sqrt(1+4ζ⁴) − 2ζ²), PM = atan(2ζωn/ωc)
// (Ogata, Modern Control Engineering; Franklin, Powell & Emami-Naeini;
// memory). The form below is the same expression rearranged to avoid
// cancellation for large ζ: sqrt(1+4ζ⁴) − 2ζ² = 1/(sqrt(1+4ζ⁴) + 2ζ²).
func secondOrderPMDeg(zeta float64) float64 {
	z2 := zeta * zeta
	wc := math.Sqrt(1 / (math.Sqrt(1+4*z2*z2) + 2*z2))
	return math.Atan2(2*zeta, wc) * 180 / math.Pi
}

// OvershootFromPM returns the closed-loop step overshoot, as a fraction of
// the final value, of the second-order loop ωn²/(s(s+2ζωn)) whose phase
// margin is pmDeg: ζ is found from PM = atan(2ζ/sqrt(sqrt(1+4ζ⁴) − 2ζ²))
// and the overshoot is exp(−πζ/sqrt(1−ζ²)) for ζ < 1, 0 otherwise (Ogata,
// Modern Control Engineering; Franklin, Powell & Emami-Naeini, Feedback
// Control of Dynamic Systems; memory). It is an estimate for real loops
// that behave like a second-order system near crossover. PM ≥ 90° has no
// finite ζ and gives 0; PM ≤ 0 (unstable) or non-finite is an error.
func OvershootFromPM(pmDeg float64) (float64, error) {
	if math.IsNaN(pmDeg) || math.IsInf(pmDeg, 0) || pmDeg <= 0 {
		return 0, fmt.Errorf("overshoot from phase margin %g°: %w", pmDeg, errBadPM)
	}
	if pmDeg >= 90 {
		return 0, nil
	}
	// PM(ζ) rises monotonically from 0° at ζ=0 towards 90°; bisect.
	lo, hi := 0.0, 1.0
	for secondOrderPMDeg(hi) < pmDeg && hi < 1e8 {
		hi *= 2
	}
	for i := 0; i < 200 && hi-lo > 1e-15*hi; i++ {
		mid := 0.5 * (lo + hi)
		if secondOrderPMDeg(mid) < pmDeg {
			lo = mid
		} else {
			hi = mid
		}
	}
	zeta := 0.5 * (lo + hi)
	if zeta >= 1 {
		return 0, nil
	}
	return math.Exp(-math.Pi * zeta / math.Sqrt(1-zeta*zeta)), nil
}

// phaseDeg returns angle(z) in degrees in (−180, 180].
func phaseDeg(z complex128) float64 {
	d := cmplx.Phase(z) * 180 / math.Pi
	if d == -180 {
		d = 180
	}
	return d
}
