// Package analysis is loopsweep's numeric core: single-bin DFT tone
// estimation, loop gain from voltage injection, phase unwrapping and
// stability margins. It has no I/O, clock or goroutines: slices in,
// numbers out.
package analysis
