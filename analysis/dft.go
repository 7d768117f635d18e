package analysis

import "math"

// The single-bin DFT. Each record is cut into blocks of blockLen samples.
// Inside a block the sums Σ d[m]·e^(−j·k·θ·m) use a table of
// e^(−j·k·θ·m) shared by both channels and every block; the block's sum is
// then turned by e^(−j·k·θ·n0), n0 the block's first sample, computed
// directly from the phase reduced to [0, 1) cycle. No phasor is carried
// from one block to the next, so rounding does not grow with the record
// (a rotating phasor drifts by about n·ε after n steps); every table entry
// is within a few ε of exact, being re-seeded from math.Sincos every
// reseedEvery entries. The inner loops have no recurrence through the
// phasor, only independent sums, which keeps them close to the speed of
// a pass that only adds the samples.

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

// expNeg returns e^(−j·2π·cyc).
func expNeg(cyc float64) complex128 {
	cyc -= math.Floor(cyc)
	s, c := math.Sincos(2 * math.Pi * cyc)
	return complex(c, -s)
}

// tables holds e^(−j·k·θ·m), k = 1..3, m < blockLen, as separate real and
// imaginary slices, and the Hann window's cos/sin(2π·m/N) when needed.
type tables struct {
	re, im     [3][]float64
	hcos, hsin []float64
}

func newTables(b int, r float64, k int, hannN int) *tables {
	t := &tables{}
	for h := 0; h < k; h++ {
		t.re[h] = make([]float64, b)
		t.im[h] = make([]float64, b)
	}
	fill := func(re, im []float64, cyc float64) {
		var w, step complex128
		step = expNeg(cyc)
		for m := range re {
			if m%reseedEvery == 0 {
				w = expNeg(math.Mod(float64(m)*cyc, 1))
			} else {
				w *= step
			}
			re[m], im[m] = real(w), imag(w)
		}
	}
	fill(t.re[0], t.im[0], r)
	for h := 1; h < k; h++ {
		for m := 0; m < b; m++ {
			// e^(−j(h+1)θm) = e^(−jhθm)·e^(−jθm)
			w := complex(t.re[h-1][m], t.im[h-1][m]) * complex(t.re[0][m], t.im[0][m])
			t.re[h][m], t.im[h][m] = real(w), imag(w)
		}
	}
	if hannN > 0 {
		t.hcos = make([]float64, b)
		t.hsin = make([]float64, b)
		fill(t.hcos, t.hsin, 1/float64(hannN))
		for m := range t.hsin {
			t.hsin[m] = -t.hsin[m] // fill stores e^(−j…); keep +sin
		}
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
	var d1, d2 []float64
	if hann {
		d1 = make([]float64, b)
		if x2 != nil {
			d2 = make([]float64, b)
		}
	}
	for n0 := 0; n0 < n; n0 += b {
		l := min(b, n-n0)
		y1 := x1[n0 : n0+l]
		var y2 []float64
		if x2 != nil {
			y2 = x2[n0 : n0+l]
		}
		var p1, p2 sums
		if hann {
			ca, sa := hannPhase(n0, n)
			q1 := windowBlock(d1[:l], y1, o1, t, ca, sa)
			y1 = d1[:l]
			if y2 != nil {
				q2 := windowBlock(d2[:l], y2, o2, t, ca, sa)
				y2 = d2[:l]
				p1, p2 = blockPair(y1, y2, 0, 0, t, k)
				p2.Q = q2
			} else {
				p1 = blockOne(y1, 0, t, k)
			}
			p1.Q = q1
		} else if y2 != nil {
			p1, p2 = blockPair(y1, y2, o1, o2, t, k)
		} else {
			p1 = blockOne(y1, o1, t, k)
		}
		turn(&a1, &p1, n0, r, k)
		if x2 != nil {
			turn(&a2, &p2, n0, r, k)
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
	hc, hs := t.hcos[:len(d)], t.hsin[:len(d)]
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

// turn adds a block's sums, referred to the block's first sample n0, to
// the record's sums referred to sample 0.
func turn(a, p *sums, n0 int, r float64, k int) {
	a.S0 += p.S0
	a.Q += p.Q
	for h := 0; h < k; h++ {
		cyc := math.Mod(float64(n0)*float64(h+1)*r, 1)
		a.C[h] += p.C[h] * expNeg(cyc)
	}
}

func blockOne(y []float64, o float64, t *tables, k int) sums {
	var s sums
	if k == 1 {
		tr, ti := t.re[0][:len(y)], t.im[0][:len(y)]
		var s0, q, cr, ci float64
		for m, v := range y {
			v -= o
			s0 += v
			q += v * v
			cr += v * tr[m]
			ci += v * ti[m]
		}
		s.S0, s.Q, s.C[0] = s0, q, complex(cr, ci)
		return s
	}
	r1, i1 := t.re[0][:len(y)], t.im[0][:len(y)]
	r2, i2 := t.re[1][:len(y)], t.im[1][:len(y)]
	r3, i3 := t.re[2][:len(y)], t.im[2][:len(y)]
	var s0, q, c1r, c1i, c2r, c2i, c3r, c3i float64
	for m, v := range y {
		v -= o
		s0 += v
		q += v * v
		c1r += v * r1[m]
		c1i += v * i1[m]
		c2r += v * r2[m]
		c2i += v * i2[m]
		c3r += v * r3[m]
		c3i += v * i3[m]
	}
	s.S0, s.Q = s0, q
	s.C = [3]complex128{complex(c1r, c1i), complex(c2r, c2i), complex(c3r, c3i)}
	return s
}

func blockPair(y1, y2 []float64, o1, o2 float64, t *tables, k int) (sums, sums) {
	var s1, s2 sums
	y2 = y2[:len(y1)]
	if k == 1 {
		tr, ti := t.re[0][:len(y1)], t.im[0][:len(y1)]
		var a0, aq, ar, ai, b0, bq, br, bi float64
		for m, u := range y1 {
			u -= o1
			v := y2[m] - o2
			c, s := tr[m], ti[m]
			a0 += u
			aq += u * u
			ar += u * c
			ai += u * s
			b0 += v
			bq += v * v
			br += v * c
			bi += v * s
		}
		s1.S0, s1.Q, s1.C[0] = a0, aq, complex(ar, ai)
		s2.S0, s2.Q, s2.C[0] = b0, bq, complex(br, bi)
		return s1, s2
	}
	r1, i1 := t.re[0][:len(y1)], t.im[0][:len(y1)]
	r2, i2 := t.re[1][:len(y1)], t.im[1][:len(y1)]
	r3, i3 := t.re[2][:len(y1)], t.im[2][:len(y1)]
	var a0, aq, a1r, a1i, a2r, a2i, a3r, a3i float64
	var b0, bq, b1r, b1i, b2r, b2i, b3r, b3i float64
	for m, u := range y1 {
		u -= o1
		v := y2[m] - o2
		a0 += u
		aq += u * u
		b0 += v
		bq += v * v
		c, s := r1[m], i1[m]
		a1r += u * c
		a1i += u * s
		b1r += v * c
		b1i += v * s
		c, s = r2[m], i2[m]
		a2r += u * c
		a2i += u * s
		b2r += v * c
		b2i += v * s
		c, s = r3[m], i3[m]
		a3r += u * c
		a3i += u * s
		b3r += v * c
		b3i += v * s
	}
	s1.S0, s1.Q = a0, aq
	s1.C = [3]complex128{complex(a1r, a1i), complex(a2r, a2i), complex(a3r, a3i)}
	s2.S0, s2.Q = b0, bq
	s2.C = [3]complex128{complex(b1r, b1i), complex(b2r, b2i), complex(b3r, b3i)}
	return s1, s2
}
