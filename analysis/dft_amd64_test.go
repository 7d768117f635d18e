//go:build amd64 && !purego

package analysis

import (
	"math"
	"math/rand/v2"
	"testing"
)

// kernelLens are block lengths for the kernel checks: empty, tiny, odd,
// each tail length 1 to 3 after multiples of 4 and 8, and full blocks.
var kernelLens = []int{0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 15, 16, 17, 31, 33, 63, 64, 65, 100, 257, 510, 511, 512}

// withinSum reports whether got and want, two orderings of the same sum
// of n terms whose absolute values add up to abs, agree within the
// rounding bound of recursive summation, 2·n·ε·Σ|terms| (Higham,
// Accuracy and Stability of Numerical Algorithms, §4.2), plus a floor for
// n = 0.
func withinSum(got, want float64, n int, abs float64) bool {
	tol := 2*float64(n+1)*0x1p-52*abs + 1e-300
	return math.Abs(got-want) <= tol
}

// The AVX2+FMA kernels against the pure-Go loops they replace, on random
// blocks with an offset, at every length in kernelLens, with and without
// harmonics. Every sum must agree within the summation rounding bound; a
// lost, doubled or misplaced term would be off by far more.
func TestKernelsMatchPureGo(t *testing.T) {
	if !useAVX2 {
		t.Skip("CPU lacks AVX2 or FMA: only the pure-Go loops run here")
	}
	rng := rand.New(rand.NewPCG(7, 11))
	for trial := 0; trial < 20; trial++ {
		r := rng.Float64() * 0.16
		tb := newTables(blockLen, r, 3, 0)
		for _, n := range kernelLens {
			y1, y2 := make([]float64, n), make([]float64, n)
			for i := range y1 {
				y1[i] = 3 + rng.NormFloat64()
				y2[i] = -1 + 0.2*rng.NormFloat64()
			}
			o1, o2 := 2.5+rng.Float64(), -1.1
			for _, k := range []int{1, 3} {
				g1, g2 := blockSums2AVX2(y1, y2, o1, o2, tb, k)
				for ch, c := range []struct {
					y    []float64
					o    float64
					got  sums
					want sums
				}{{y1, o1, g1, blockSums(y1, o1, tb, k)}, {y2, o2, g2, blockSums(y2, o2, tb, k)}} {
					var a0, aq float64
					var ac [3]float64
					for i, v := range c.y {
						u := math.Abs(v - c.o)
						a0 += u
						aq += u * u
						for h := 0; h < k; h++ {
							ac[h] += u * (math.Abs(tb.re[h][i]) + math.Abs(tb.im[h][i]))
						}
					}
					ok := withinSum(c.got.S0, c.want.S0, n, a0) && withinSum(c.got.Q, c.want.Q, n, aq)
					for h := 0; h < k; h++ {
						ok = ok && withinSum(real(c.got.C[h]), real(c.want.C[h]), n, ac[h]) &&
							withinSum(imag(c.got.C[h]), imag(c.want.C[h]), n, ac[h])
					}
					if !ok {
						t.Fatalf("r=%g n=%d k=%d channel %d: kernel %+v, pure Go %+v", r, n, k, ch+1, c.got, c.want)
					}
				}
			}
		}
	}
}

// The Hann kernels (window and fundamental fused, then the harmonics on
// the windowed block) against hannSums2Go (windowBlock, then blockSums):
// every windowed sample within 4ε of |y−o| (the weight is formed in a
// different order, each step rounding once) and every sum within the
// summation bound widened by those 4ε a term.
func TestHannKernelsMatchPureGo(t *testing.T) {
	if !useAVX2 {
		t.Skip("CPU lacks AVX2 or FMA: only the pure-Go loops run here")
	}
	rng := rand.New(rand.NewPCG(3, 5))
	for trial := 0; trial < 10; trial++ {
		hn := 600 + rng.IntN(5000)
		tb := newTables(blockLen, rng.Float64()*0.16, 3, hn)
		ca, sa := hannPhase(rng.IntN(hn), hn)
		for _, n := range kernelLens {
			y1, y2 := make([]float64, n), make([]float64, n)
			for i := range y1 {
				y1[i] = 1 + rng.NormFloat64()
				y2[i] = rng.NormFloat64()
			}
			o1, o2 := 0.7, 0.1
			for _, k := range []int{1, 3} {
				g1, g2 := make([]float64, n), make([]float64, n)
				w1, w2 := make([]float64, n), make([]float64, n)
				s1, s2 := hannSums2AVX2(g1, g2, y1, y2, o1, o2, tb, ca, sa, k)
				r1, r2 := hannSums2Go(w1, w2, y1, y2, o1, o2, tb, ca, sa, k)
				for ch, c := range []struct {
					y, got, want []float64
					o            float64
					sg, sw       sums
				}{{y1, g1, w1, o1, s1, r1}, {y2, g2, w2, o2, s2, r2}} {
					var a0, aq float64
					var ac [3]float64
					for i, v := range c.y {
						u := math.Abs(v - c.o)
						if math.Abs(c.got[i]-c.want[i]) > 4*0x1p-52*u {
							t.Fatalf("n=%d channel %d sample %d: kernel %g, pure Go %g", n, ch+1, i, c.got[i], c.want[i])
						}
						a0 += u
						aq += u * u
						for h := 0; h < k; h++ {
							ac[h] += u * (math.Abs(tb.re[h][i]) + math.Abs(tb.im[h][i]))
						}
					}
					within := func(got, want, abs float64) bool { return withinSum(got, want, n+2, abs) }
					ok := within(c.sg.S0, c.sw.S0, a0) && within(c.sg.Q, c.sw.Q, aq)
					for h := 0; h < k; h++ {
						ok = ok && within(real(c.sg.C[h]), real(c.sw.C[h]), ac[h]) &&
							within(imag(c.sg.C[h]), imag(c.sw.C[h]), ac[h])
					}
					if !ok {
						t.Fatalf("n=%d k=%d channel %d: kernel %+v, pure Go %+v", n, k, ch+1, c.sg, c.sw)
					}
				}
			}
		}
	}
}

// EstimatePair with the kernels against EstimatePair with the pure-Go
// loops, for each window and both harmonic settings, on a noisy record
// whose span is not a multiple of the block or of 4: the tones agree to
// 1e-12 relative (amplitude, DC) and 1e-12 rad; the noise variance, the
// difference Σu² − fit (which cancels all but about 1e-6 of Σu² here),
// to 1e-12 of the record's mean square.
func TestEstimatePairKernelsMatchPureGo(t *testing.T) {
	if !useAVX2 {
		t.Skip("CPU lacks AVX2 or FMA: only the pure-Go loops run here")
	}
	const n, dt, f = 12_345, 1e-6, 2345.6
	rng := rand.New(rand.NewPCG(9, 9))
	x := synth(n, dt, f, 0.3, []float64{1, 0.01, 0.003}, []float64{0.2, 1, 2})
	y := synth(n, dt, f, -0.1, []float64{0.5, 0.002}, []float64{-2, 0.5})
	for i := range x {
		x[i] += 1e-3 * rng.NormFloat64()
		y[i] += 1e-3 * rng.NormFloat64()
	}
	ms := func(v []float64) float64 {
		s := 0.0
		for _, e := range v {
			s += e * e
		}
		return s / float64(len(v))
	}
	for _, opt := range []ToneOptions{{}, {SkipHarmonics: true}, {Window: Hann}, {Window: Hann, SkipHarmonics: true}} {
		a1, a2, err := EstimatePair(x, y, dt, f, opt, opt)
		if err != nil {
			t.Fatal(err)
		}
		useAVX2 = false
		b1, b2, err := EstimatePair(x, y, dt, f, opt, opt)
		useAVX2 = true
		if err != nil {
			t.Fatal(err)
		}
		for i, p := range [][2]Tone{{a1, b1}, {a2, b2}} {
			g, w := p[0], p[1]
			rec := [][]float64{x, y}[i]
			rel := func(a, b float64) bool { return math.Abs(a-b) <= 1e-12*math.Abs(b) }
			if !rel(g.AmpPeak, w.AmpPeak) || math.Abs(g.PhaseRad-w.PhaseRad) > 1e-12 ||
				!rel(g.DC, w.DC) || math.Abs(g.NoiseRMS*g.NoiseRMS-w.NoiseRMS*w.NoiseRMS) > 1e-12*ms(rec) || math.Abs(g.H2dBc-w.H2dBc) > 1e-9 {
				t.Errorf("%+v: kernels %+v, pure Go %+v", opt, g, w)
			}
		}
	}
}
