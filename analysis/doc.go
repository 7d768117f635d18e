// Package analysis is loopsweep's numeric core: single-bin DFT tone
// estimation, loop gain from voltage injection, phase unwrapping and
// stability margins. It has no I/O, clock or goroutines: slices in,
// numbers out.
//
// Units and conventions: frequencies in Hz, amplitudes in volts peak,
// tone phases in radians in (−π, π] referred to the first sample,
// response phases in degrees wrapped to (−180, 180], gains in dB
// (20·log10). Loop gain follows the control convention L = −V_return /
// V_injection, so the phase margin is 180° + angle(L) where |L| = 1.
//
// Files: span.go (whole-cycle span and input checks), dft.go (the
// single-pass sums), fit.go (the least-squares tone fit), tone.go (tone
// estimates, noise, SNR, harmonics, clipping), response.go (loop gain and
// transfer ratios with uncertainties), margins.go (crossovers, margins,
// modulus margin), units.go (dB, wrapping, unwrapping, closed loop,
// overshoot).
package analysis
