package analysis

import (
	"math"
	"math/rand/v2"
	"testing"
)

// exactTurn returns e^(−j·2π·q·r) for an integer q, with q·r split
// exactly into hi + lo by math.FMA (Higham, §2.4: the error of a product
// is representable), so only the final phase carries rounding.
func exactTurn(q int, r float64) (float64, float64) {
	hi := float64(q) * r
	lo := math.FMA(float64(q), r, -hi)
	frac := (hi - math.Floor(hi)) + lo
	s, c := math.Sincos(2 * math.Pi * frac)
	return c, -s
}

// The tables of e^(−j·k·θ·m) for k = 1..3 and the Hann cos/sin against
// the exactly reduced phase. Each entry is a seed from Sincos turned by
// up to reseedEvery−1 steps of a recurrence, each step rounding by about
// ε, and harmonic k is a product of k such entries: the bound is
// 2·k·reseedEvery·ε (64ε, 128ε, 192ε). A phasor rotated through the whole
// block would drift by about 512·k·ε, and a seed whose phase m·θ is
// rounded before reduction is off by about ε·m·θ (600ε at the end of a
// block at 0.16 cycles per sample).
func TestTablesAccurate(t *testing.T) {
	rng := rand.New(rand.NewPCG(17, 19))
	var worst [4]float64 // harmonics 1..3, Hann
	for trial := 0; trial < 50; trial++ {
		r := rng.Float64() * 0.5 / 3
		hn := 600 + rng.IntN(100000)
		tb := newTables(blockLen, r, 3, hn)
		for m := 0; m < blockLen; m++ {
			for h := 0; h < 3; h++ {
				c, s := exactTurn((h+1)*m, r)
				worst[h] = math.Max(worst[h], math.Hypot(tb.re[h][m]-c, tb.im[h][m]-s))
			}
			c, s := exactTurn(m, 1/float64(hn))
			worst[3] = math.Max(worst[3], math.Hypot(tb.hcos[m]-c, tb.hsin[m]+s))
		}
		releaseTables(tb)
	}
	for i, w := range worst {
		k := 1 // the Hann table is one recurrence, as harmonic 1
		if i < 3 {
			k = i + 1
		}
		bound := float64(2*k*reseedEvery) * 0x1p-52
		t.Logf("table %d: worst error %.3g (%.1f ε), bound %.0f ε", i+1, w, w/0x1p-52, bound/0x1p-52)
		if w > bound {
			t.Errorf("table %d (4 = Hann): worst error %.3g, over the bound %.3g", i+1, w, bound)
		}
	}
}
