//go:build amd64 && !purego

package analysis

import "golang.org/x/sys/cpu"

// useAVX2 selects the AVX2+FMA kernels of dft_amd64.s, when the CPU and
// the operating system support them (x/sys/cpu checks both); otherwise the
// pure-Go loops of dft.go run, which are also the reference the kernels
// are tested against.
var useAVX2 = cpu.X86.HasAVX2 && cpu.X86.HasFMA

//go:noescape
func fund2AVX2(y1, y2, tr, ti *float64, n int, o1, o2 float64, out *[32]float64)

//go:noescape
func harm2AVX2(y1, y2, r2, i2, r3, i3 *float64, n int, o1, o2 float64, out *[32]float64)

//go:noescape
func hannFund2AVX2(d1, d2, y1, y2, hc, hs, tr, ti *float64, n int, a, b, o1, o2 float64, out *[32]float64)

// blockSums2 returns both channels' sums over a block, as blockSums does
// for each.
func blockSums2(y1, y2 []float64, o1, o2 float64, t *tables, k int) (sums, sums) {
	if !useAVX2 {
		return blockSums(y1, o1, t, k), blockSums(y2, o2, t, k)
	}
	return blockSums2AVX2(y1, y2, o1, o2, t, k)
}

// hannSums2 windows both channels' blocks into d1 and d2 and returns
// their sums, as hannSums2Go does.
func hannSums2(d1, d2, y1, y2 []float64, o1, o2 float64, t *tables, ca, sa float64, k int) (sums, sums) {
	if !useAVX2 {
		return hannSums2Go(d1, d2, y1, y2, o1, o2, t, ca, sa, k)
	}
	return hannSums2AVX2(d1, d2, y1, y2, o1, o2, t, ca, sa, k)
}

// lanes adds the four lanes of an accumulator that starts at out[i].
func lanes(out []float64, i int) float64 {
	return (out[i] + out[i+1]) + (out[i+2] + out[i+3])
}

// blockSums2AVX2 runs the kernels on the multiple-of-4 part of the block
// and the pure-Go loops on the last 0 to 3 samples.
func blockSums2AVX2(y1, y2 []float64, o1, o2 float64, t *tables, k int) (a, b sums) {
	n := len(y1)
	y2 = y2[:n]
	m := n &^ 3
	tr, ti := t.re[0][:n], t.im[0][:n]
	var out [32]float64
	if m > 0 {
		fund2AVX2(&y1[0], &y2[0], &tr[0], &ti[0], m, o1, o2, &out)
	}
	a.S0, a.Q, a.C[0] = lanes(out[:], 0), lanes(out[:], 4), complex(lanes(out[:], 8), lanes(out[:], 12))
	b.S0, b.Q, b.C[0] = lanes(out[:], 16), lanes(out[:], 20), complex(lanes(out[:], 24), lanes(out[:], 28))
	if m < n {
		s0, q, c := sumFund(y1[m:], o1, tr[m:], ti[m:])
		a.S0, a.Q, a.C[0] = a.S0+s0, a.Q+q, a.C[0]+c
		s0, q, c = sumFund(y2[m:], o2, tr[m:], ti[m:])
		b.S0, b.Q, b.C[0] = b.S0+s0, b.Q+q, b.C[0]+c
	}
	if k > 1 {
		harmPairAVX2(&a, &b, y1, y2, o1, o2, t)
	}
	return a, b
}

// harmPairAVX2 sets the 2nd and 3rd harmonic sums of a and b.
func harmPairAVX2(a, b *sums, y1, y2 []float64, o1, o2 float64, t *tables) {
	n := len(y1)
	y2 = y2[:n]
	m := n &^ 3
	r2, i2, r3, i3 := t.re[1][:n], t.im[1][:n], t.re[2][:n], t.im[2][:n]
	var out [32]float64
	if m > 0 {
		harm2AVX2(&y1[0], &y2[0], &r2[0], &i2[0], &r3[0], &i3[0], m, o1, o2, &out)
	}
	a.C[1] = complex(lanes(out[:], 0), lanes(out[:], 4))
	a.C[2] = complex(lanes(out[:], 8), lanes(out[:], 12))
	b.C[1] = complex(lanes(out[:], 16), lanes(out[:], 20))
	b.C[2] = complex(lanes(out[:], 24), lanes(out[:], 28))
	if m < n {
		c2, c3 := sumHarm(y1[m:], o1, r2[m:], i2[m:], r3[m:], i3[m:])
		a.C[1], a.C[2] = a.C[1]+c2, a.C[2]+c3
		c2, c3 = sumHarm(y2[m:], o2, r2[m:], i2[m:], r3[m:], i3[m:])
		b.C[1], b.C[2] = b.C[1]+c2, b.C[2]+c3
	}
}

// hannSums2AVX2 is hannSums2 with the fused window-and-fundamental kernel
// on the multiple-of-4 part (the last 0 to 3 samples in pure Go), then the
// harmonic kernel on the windowed blocks. The kernel forms the weight as
// 0.5 + (−0.5·ca)·hc + (0.5·sa)·hs, which rounds differently from
// windowBlock by a few ε.
func hannSums2AVX2(d1, d2, y1, y2 []float64, o1, o2 float64, t *tables, ca, sa float64, k int) (a, b sums) {
	n := len(d1)
	d2, y1, y2 = d2[:n], y1[:n], y2[:n]
	hc, hs := t.hcos[:n], t.hsin[:n]
	tr, ti := t.re[0][:n], t.im[0][:n]
	m := n &^ 3
	var out [32]float64
	if m > 0 {
		hannFund2AVX2(&d1[0], &d2[0], &y1[0], &y2[0], &hc[0], &hs[0], &tr[0], &ti[0], m, -0.5*ca, 0.5*sa, o1, o2, &out)
	}
	a.S0, a.Q, a.C[0] = lanes(out[:], 0), lanes(out[:], 4), complex(lanes(out[:], 8), lanes(out[:], 12))
	b.S0, b.Q, b.C[0] = lanes(out[:], 16), lanes(out[:], 20), complex(lanes(out[:], 24), lanes(out[:], 28))
	if m < n {
		q := windowTail(d1[m:], y1[m:], o1, hc[m:], hs[m:], ca, sa)
		s0, _, c := sumFund(d1[m:], 0, tr[m:], ti[m:])
		a.S0, a.Q, a.C[0] = a.S0+s0, a.Q+q, a.C[0]+c
		q = windowTail(d2[m:], y2[m:], o2, hc[m:], hs[m:], ca, sa)
		s0, _, c = sumFund(d2[m:], 0, tr[m:], ti[m:])
		b.S0, b.Q, b.C[0] = b.S0+s0, b.Q+q, b.C[0]+c
	}
	if k > 1 {
		harmPairAVX2(&a, &b, d1, d2, 0, 0, t)
	}
	return a, b
}
