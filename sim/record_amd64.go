//go:build amd64 && !purego

package sim

import "golang.org/x/sys/cpu"

// useAVX2 selects the AVX2+FMA kernels of record_amd64.s for the common
// blocks (small signal, REAL,32 data) when the CPU and the
// operating system support them (x/sys/cpu checks both); otherwise the
// pure-Go loops of record.go run, which are also the reference the
// kernels are tested against. A variable so the tests can run both.
var useAVX2 = cpu.X86.HasAVX2 && cpu.X86.HasFMA

// fillSmallAVX2 is blockPhasors.fill's small-signal loop, four samples
// a step; c holds yr, yi, vr, vi, rr, ri, sq, k3, er, ei.
//
//go:noescape
func fillSmallAVX2(xb, yb *[block]float64, t *phasorTables, c *[10]float64)

// quantiseEncodeAVX2 is adc.quantiseEncode's loop, four samples a step
// (the table look-up by VPGATHERDD); c holds base, inv, sn, lo, hi.
//
//go:noescape
func quantiseEncodeAVX2(out *[block]int16, body *[4 * block]byte, tab *real32Codes, v *[block]float64, nz *[block]float32, c *[5]float64)

// fillSmallFast runs fillSmallAVX2 and reports true, or reports false
// (the caller's Go loop runs) without AVX2.
func fillSmallFast(xb, yb *[block]float64, t *phasorTables, c *[10]float64) bool {
	if !useAVX2 {
		return false
	}
	fillSmallAVX2(xb, yb, t, c)
	return true
}

// quantiseEncodeFast runs quantiseEncodeAVX2 and reports true, or
// reports false without AVX2.
func quantiseEncodeFast(out *[block]int16, body *[4 * block]byte, tab *real32Codes, v *[block]float64, nz *[block]float32, c *[5]float64) bool {
	if !useAVX2 {
		return false
	}
	quantiseEncodeAVX2(out, body, tab, v, nz, c)
	return true
}
