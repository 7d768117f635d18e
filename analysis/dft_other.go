//go:build !amd64 || purego

package analysis

// useAVX2 is false off amd64 (or with the purego tag): the pure-Go loops
// of dft.go run.
const useAVX2 = false

// blockSums2 returns both channels' sums over a block, as blockSums does
// for each.
func blockSums2(y1, y2 []float64, o1, o2 float64, t *tables, k int) (sums, sums) {
	return blockSums(y1, o1, t, k), blockSums(y2, o2, t, k)
}

// windowPair windows both channels' blocks, as windowBlock does for each.
func windowPair(d1, d2, y1, y2 []float64, o1, o2 float64, t *tables, ca, sa float64) (float64, float64) {
	return windowBlock(d1, y1, o1, t, ca, sa), windowBlock(d2, y2, o2, t, ca, sa)
}
