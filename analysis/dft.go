package analysis

import (
	"math"
	"sync"
)

// The single-bin DFT. Each record is cut into blocks of blockLen samples.
// Inside a block the sums Σ d[m]·e^(−j·k·θ·m) use a table of
// e^(−j·k·θ·m) shared by both channels and every block; the block's sum is
// then turned by e^(−j·k·θ·n0), n0 the block's first sample, computed
// directly from the phase reduced exactly to [0, 1) cycle (turnOf). No
// phasor is carried from one block to the next, so rounding does not grow
// with the record (a rotating phasor drifts by about n·ε after n steps);
// every table entry of harmonic k is within 2·k·reseedEvery·ε of exact
// (TestTablesAccurate), being re-seeded from math.Sincos every
// reseedEvery entries. The inner loops have no recurrence through the
// phasor, only independent sums, which keeps them close to the speed of
// a pass that only adds the samples. Memory is read once, block by block.
//
// On amd64 with AVX2 and FMA (dft_amd64.go) the block sums of both
// channels run in one pass of assembly kernels, four samples a vector,
// each table vector loaded once for the two channels. Elsewhere, and as
// the reference the kernels are tested against, each channel's sums run
// in the short pure-Go loops below (blockSums), which keep every
// accumulator in a register.

const (
	blockLen    = 512
	reseedEvery = 32
)

// sums are one channel's accumulators over the span: S0 = Σd, Q = Σw·x²
// (x shifted by the channel's offset), C[k−1] = Σ d·e^(−j·k·θ·n), with
// d = w·x the windowed, shifted sample.
type sums struct {
	S0, Q float64
	C     [3]complex128
}

func (s *sums) finite() bool {
	ok := !math.IsNaN(s.S0+s.Q) && !math.IsInf(s.S0+s.Q, 0)
	for _, c := range s.C {
		v := real(c) + imag(c)
		ok = ok && !math.IsNaN(v) && !math.IsInf(v, 0)
	}
	return ok
}

// expNeg returns e^(−j·2π·cyc) for cyc ≥ 0. The whole cycles are taken
// off exactly (cyc − ⌊cyc⌋ is exact in float64), so that the argument of
// Sincos is in [0, 2π).
func expNeg(cyc float64) complex128 {
	cyc -= math.Floor(cyc)
	s, c := math.Sincos(2 * math.Pi * cyc)
	return complex(c, -s)
}

// turnOf returns e^(−j·2π·q·r) for an integer q ≥ 0 and r ≥ 0. The
// product q·r is split exactly into hi + lo (math.FMA gives the rounding
// error of hi), so the fraction of a cycle is right to about ε even when
// q·r is many cycles: rounding q·r alone would cost ε·q·r cycles, 1e-10
// rad at the end of a record of 1e6 samples.
func turnOf(q int, r float64) complex128 {
	fq := float64(q)
	hi := fq * r
	lo := math.FMA(fq, r, -hi)
	return expNeg((hi - math.Floor(hi)) + lo)
}

// tables holds e^(−j·k·θ·m), k = 1..3, m < blockLen, as separate real and
// imaginary slices, and the Hann window's cos/sin(2π·m/N) and the two
// channels' windowed blocks d when needed. All of them are cut from buf,
// which is reused through tablePool.
type tables struct {
	re, im     [3][]float64
	hcos, hsin []float64
	d          [2][]float64
	buf        []float64
}

// tablePool keeps tables between calls, so that a sweep of many short
// records does not allocate and clear a table for each.
var tablePool = sync.Pool{New: func() any { return new(tables) }}

// releaseTables returns t to the pool; t must not be used afterwards.
func releaseTables(t *tables) { tablePool.Put(t) }

func newTables(b int, r float64, k int, hannN int) *tables {
	t := tablePool.Get().(*tables)
	// Each slice starts tablePad values (320 bytes) further along a 4 KiB
	// page than the one before, and none at a page start: with slices
	// 4 KiB apart (512 values) the kernels' loads and the stores of the
	// windowed blocks would share their low 12 address bits, which the
	// CPU takes for a possible overlap and waits on (4K aliasing).
	const tablePad = 40
	slices := 2 * k
	if hannN > 0 {
		slices += 4
	}
	need := slices * (b + tablePad)
	if cap(t.buf) < need {
		t.buf = make([]float64, need)
	}
	buf := t.buf[:need]
	cut := func() []float64 {
		s := buf[tablePad : tablePad+b : tablePad+b]
		buf = buf[tablePad+b:]
		return s
	}
	*t = tables{buf: t.buf}
	for h := 0; h < k; h++ {
		t.re[h] = cut()
		t.im[h] = cut()
	}
	// fill stores e^(−j·2π·cyc·m): a seed from expNeg every reseedEvery
	// entries, turned by e^(−j·2π·cyc·j), j < reseedEvery, from a short
	// recurrence; the entries do not depend on one another, so the loop
	// has no chain through a rotating phasor.
	fill := func(re, im []float64, cyc float64) {
		var pr, pi [reseedEvery]float64
		step := expNeg(cyc)
		w := complex(1, 0)
		for j := range pr {
			pr[j], pi[j] = real(w), imag(w)
			w *= step
		}
		for m0 := 0; m0 < len(re); m0 += reseedEvery {
			s := turnOf(m0, cyc)
			sr, si := real(s), imag(s)
			end := min(m0+reseedEvery, len(re))
			cr, ci := re[m0:end], im[m0:end]
			ci = ci[:len(cr)]
			for j := range cr {
				// (sr + j·si)·(pr + j·pi)
				cr[j] = sr*pr[j] - si*pi[j]
				ci[j] = sr*pi[j] + si*pr[j]
			}
		}
	}
	fill(t.re[0], t.im[0], r)
	r1, i1 := t.re[0], t.im[0]
	for h := 1; h < k; h++ {
		// e^(−j(h+1)θm) = e^(−jhθm)·e^(−jθm)
		hr, hi := t.re[h], t.im[h]
		pr, pi := t.re[h-1][:len(hr)], t.im[h-1][:len(hr)]
		hi, r1, i1 := hi[:len(hr)], r1[:len(hr)], i1[:len(hr)]
		for m := range hr {
			a, c := pr[m], pi[m]
			hr[m] = a*r1[m] - c*i1[m]
			hi[m] = a*i1[m] + c*r1[m]
		}
	}
	if hannN > 0 {
		t.hcos = cut()
		t.hsin = cut()
		fill(t.hcos, t.hsin, 1/float64(hannN))
		for m := range t.hsin {
			t.hsin[m] = -t.hsin[m] // fill stores e^(−j…); keep +sin
		}
		t.d[0], t.d[1] = cut(), cut()
	}
	return t
}

// accumulate runs the single pass over x1[:n] and, when x2 is not nil,
// x2[:n]: k harmonics (1 or 3), cycles per sample r, offsets o1 and o2
// subtracted from the samples, Hann weights over n when hann is set.
func accumulate(x1, x2 []float64, n int, r float64, k int, hann bool, o1, o2 float64) (a1, a2 sums) {
	b := min(blockLen, n)
	hn := 0
	if hann {
		hn = n
	}
	t := newTables(b, r, k, hn)
	defer releaseTables(t)
	d1, d2 := t.d[0], t.d[1]
	// With the kernels a single channel runs through the two-channel
	// kernel as both channels (the second result is dropped), so that
	// EstimateTone and EstimatePair give bit-identical tones for the same
	// record.
	one := x2 == nil
	if one && useAVX2 {
		x2 = x1
	}
	for n0 := 0; n0 < n; n0 += b {
		l := min(b, n-n0)
		y1 := x1[n0 : n0+l]
		var y2 []float64
		if x2 != nil {
			y2 = x2[n0 : n0+l]
		}
		var p1, p2 sums
		switch {
		case hann && y2 != nil:
			ca, sa := hannPhase(n0, n)
			p1, p2 = hannSums2(d1[:l], d2[:l], y1, y2, o1, o2, t, ca, sa, k)
		case hann:
			ca, sa := hannPhase(n0, n)
			q1 := windowBlock(d1[:l], y1, o1, t, ca, sa)
			p1 = blockSums(d1[:l], 0, t, k)
			p1.Q = q1
		case y2 != nil:
			p1, p2 = blockSums2(y1, y2, o1, o2, t, k)
		default:
			p1 = blockSums(y1, o1, t, k)
		}
		var rot [3]complex128
		for h := 0; h < k; h++ {
			rot[h] = turnOf(n0*(h+1), r)
		}
		turn(&a1, &p1, &rot, k)
		if !one {
			turn(&a2, &p2, &rot, k)
		}
	}
	return a1, a2
}

// hannPhase returns cos and sin of 2π·n0/n.
func hannPhase(n0, n int) (float64, float64) {
	s, c := math.Sincos(2 * math.Pi * float64(n0) / float64(n))
	return c, s
}

// windowBlock writes d[m] = w[n0+m]·(y[m]−o) for the periodic Hann window
// w[n] = 0.5 − 0.5·cos(2πn/N) and returns Σ w·(y−o)².
func windowBlock(d, y []float64, o float64, t *tables, ca, sa float64) float64 {
	return windowTail(d, y, o, t.hcos, t.hsin, ca, sa)
}

// windowTail is windowBlock with the window's cos/sin table entries of
// the block's samples given as hc and hs.
func windowTail(d, y []float64, o float64, hc, hs []float64, ca, sa float64) float64 {
	hc, hs = hc[:len(d)], hs[:len(d)]
	y = y[:len(d)]
	q := 0.0
	for m := range d {
		// cos(a+b) = cos a cos b − sin a sin b
		w := 0.5 - 0.5*(ca*hc[m]-sa*hs[m])
		v := y[m] - o
		d[m] = w * v
		q += d[m] * v
	}
	return q
}

// hannSums2Go windows both channels' blocks y1, y2 into d1, d2
// (windowBlock) and returns their sums (blockSums of d, Q = Σw·(y−o)²);
// the pure-Go reference of the Hann kernel.
func hannSums2Go(d1, d2, y1, y2 []float64, o1, o2 float64, t *tables, ca, sa float64, k int) (a, b sums) {
	q1 := windowBlock(d1, y1, o1, t, ca, sa)
	q2 := windowBlock(d2, y2, o2, t, ca, sa)
	a, b = blockSums(d1, 0, t, k), blockSums(d2, 0, t, k)
	a.Q, b.Q = q1, q2
	return a, b
}

// turn adds a block's sums, referred to the block's first sample n0, to
// the record's sums referred to sample 0: rot[h] = e^(−j(h+1)θ·n0).
func turn(a, p *sums, rot *[3]complex128, k int) {
	a.S0 += p.S0
	a.Q += p.Q
	for h := 0; h < k; h++ {
		a.C[h] += p.C[h] * rot[h]
	}
}

// blockSums returns one channel's sums over a block, referred to the
// block's first sample. The fundamental and the harmonics run in separate
// loops over the block (which is in cache by then) so that every
// accumulator stays in a register; each loop adds four products as a tree
// before touching its accumulator, which breaks the add-latency chain.
func blockSums(y []float64, o float64, t *tables, k int) sums {
	var s sums
	s.S0, s.Q, s.C[0] = sumFund(y, o, t.re[0][:len(y)], t.im[0][:len(y)])
	if k > 1 {
		s.C[1], s.C[2] = sumHarm(y, o, t.re[1][:len(y)], t.im[1][:len(y)], t.re[2][:len(y)], t.im[2][:len(y)])
	}
	return s
}

// sumFund returns Σu, Σu², Σu·e^(−jθm) with u = y − o.
func sumFund(y []float64, o float64, tr, ti []float64) (s0, q float64, c complex128) {
	tr, ti = tr[:len(y)], ti[:len(y)]
	var cr, ci float64
	m := 0
	for ; m+3 < len(y); m += 4 {
		u0, u1, u2, u3 := y[m]-o, y[m+1]-o, y[m+2]-o, y[m+3]-o
		s0 += (u0 + u1) + (u2 + u3)
		q += (u0*u0 + u1*u1) + (u2*u2 + u3*u3)
		cr += (u0*tr[m] + u1*tr[m+1]) + (u2*tr[m+2] + u3*tr[m+3])
		ci += (u0*ti[m] + u1*ti[m+1]) + (u2*ti[m+2] + u3*ti[m+3])
	}
	for ; m < len(y); m++ {
		u := y[m] - o
		s0 += u
		q += u * u
		cr += u * tr[m]
		ci += u * ti[m]
	}
	return s0, q, complex(cr, ci)
}

// sumHarm returns Σu·e^(−j2θm) and Σu·e^(−j3θm) with u = y − o.
func sumHarm(y []float64, o float64, r2, i2, r3, i3 []float64) (c2, c3 complex128) {
	r2, i2, r3, i3 = r2[:len(y)], i2[:len(y)], r3[:len(y)], i3[:len(y)]
	var ar, ai, br, bi float64
	m := 0
	for ; m+1 < len(y); m += 2 {
		u0, u1 := y[m]-o, y[m+1]-o
		ar += u0*r2[m] + u1*r2[m+1]
		ai += u0*i2[m] + u1*i2[m+1]
		br += u0*r3[m] + u1*r3[m+1]
		bi += u0*i3[m] + u1*i3[m+1]
	}
	for ; m < len(y); m++ {
		u := y[m] - o
		ar += u * r2[m]
		ai += u * i2[m]
		br += u * r3[m]
		bi += u * i3[m]
	}
	return complex(ar, ai), complex(br, bi)
}
