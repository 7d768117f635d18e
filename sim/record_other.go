//go:build !amd64 || purego

package sim

// useAVX2 is false off amd64 (or with the purego tag): the pure-Go loops
// of record.go run.
var useAVX2 = false

// fillSmallFast reports false: the caller's Go loop runs.
func fillSmallFast(xb, yb *[block]float64, t *phasorTables, c *[10]float64) bool { return false }

// quantiseEncodeFast reports false: the caller's Go loop runs.
func quantiseEncodeFast(out *[block]int16, body *[4 * block]byte, tab *real32Codes, v *[block]float64, nz *[block]float32, c *[5]float64) bool {
	return false
}
