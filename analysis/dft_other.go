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

// hannSums2 windows both channels' blocks into d1 and d2 and returns
// their sums, as hannSums2Go does.
func hannSums2(d1, d2, y1, y2 []float64, o1, o2 float64, t *tables, ca, sa float64, k int) (sums, sums) {
	return hannSums2Go(d1, d2, y1, y2, o1, o2, t, ca, sa, k)
}
