package analysis

import (
	"errors"
	"math"
	"math/cmplx"
)

// The tone fit is the weighted least-squares fit of
//
//	x[n] ≈ d + Σₖ aₖ·cos(kθn) + bₖ·sin(kθn),  k = 1..K, θ = 2π·f·dt,
//
// with weights w[n] (1 for Rect, periodic Hann otherwise): the normal
// equations G·p = b with G the Gram matrix of the basis under w and b the
// single-pass sums. Over a whole number of cycles with w = 1 the Gram
// matrix is diag(N, N/2, …) and the fit is exactly the textbook single-bin
// DFT, 2/N·Σ x·e^(−jθn), the efficient estimator (Kay, vol. I); for Hann
// over many cycles it is 2/(N·0.5)·Σ w·x·e^(−jθn), the coherent gain 0.5
// normalisation (Harris 1978). Solving the small off-diagonal terms
// exactly removes the bias a plain DFT has from DC and from the tone's
// negative-frequency image when the span is not whole.

var errSingular = errors.New("tone cannot be separated from DC or its harmonics in this record")

// geomSum returns Σ_{n<N} e^(j·2π·c·n), c in cycles per sample.
func geomSum(c float64, n int) complex128 {
	c -= math.Round(c)
	if c == 0 {
		return complex(float64(n), 0)
	}
	fn := float64(n)
	num := math.Sin(math.Pi * math.Mod(c*fn, 2))
	den := math.Sin(math.Pi * c)
	ph := math.Mod(c*(fn-1)/2, 1)
	s, co := math.Sincos(2 * math.Pi * ph)
	return complex(num/den*co, num/den*s)
}

// weightSum returns S(m) = Σ w[n]·e^(j·2π·c·n) for the window.
func weightSum(c float64, n int, hann bool) complex128 {
	if !hann {
		return geomSum(c, n)
	}
	// w = 0.5 − 0.25·e^(j2πn/N) − 0.25·e^(−j2πn/N)
	inv := 1 / float64(n)
	return 0.5*geomSum(c, n) - 0.25*geomSum(c+inv, n) - 0.25*geomSum(c-inv, n)
}

// windowMoments returns Σw and Σw² over n samples.
func windowMoments(n int, hann bool) (float64, float64) {
	fn := float64(n)
	if !hann {
		return fn, fn
	}
	inv := 1 / fn
	// w² = 3/8 − ½cos(βn) + ⅛cos(2βn), β = 2π/N
	s1 := real(weightSum(0, n, true))
	s2 := 3*fn/8 - 0.5*real(geomSum(inv, n)) + 0.125*real(geomSum(2*inv, n))
	return s1, s2
}

// fitResult is the solved fit of one channel.
type fitResult struct {
	dc    float64
	ph    [3]complex128 // phasors aₖ − j·bₖ of harmonics 1..K
	resid float64       // Σ w·(x − fit)², clamped at 0
}

// gram builds the (1+2K)×(1+2K) Gram matrix, row-major, basis order
// 1, cos θn, sin θn, cos 2θn, sin 2θn, …
func gram(r float64, n, k int, hann bool) []float64 {
	p := 1 + 2*k
	var S [7]complex128 // S(m) = Σ w·e^(jmθn), m = 0..2K
	for m := 0; m <= 2*k; m++ {
		S[m] = weightSum(float64(m)*r, n, hann)
	}
	at := func(m int) complex128 {
		if m < 0 {
			return cmplx.Conj(S[-m])
		}
		return S[m]
	}
	g := make([]float64, p*p)
	set := func(i, j int, v float64) { g[i*p+j], g[j*p+i] = v, v }
	set(0, 0, real(S[0]))
	for a := 1; a <= k; a++ {
		ca, sa := 2*a-1, 2*a
		set(0, ca, real(S[a]))
		set(0, sa, imag(S[a]))
		for b := 1; b <= k; b++ {
			cb, sb := 2*b-1, 2*b
			set(ca, cb, 0.5*real(at(a-b)+at(a+b)))
			set(sa, sb, 0.5*real(at(a-b)-at(a+b)))
			// cos(aθn)·sin(bθn) = ½[sin((a+b)θn) − sin((a−b)θn)]
			set(ca, sb, 0.5*imag(at(a+b)-at(a-b)))
		}
	}
	return g
}

// cholesky factors g (p×p, row-major) in place into L·Lᵀ, lower triangle.
// A pivot below 1e-10 of its diagonal entry means the basis functions are
// nearly dependent over this record.
func cholesky(g []float64, p int) error {
	for j := 0; j < p; j++ {
		d := g[j*p+j]
		for i := 0; i < j; i++ {
			d -= g[j*p+i] * g[j*p+i]
		}
		if !(d > 1e-10*g[j*p+j]) || d <= 0 {
			return errSingular
		}
		d = math.Sqrt(d)
		g[j*p+j] = d
		for i := j + 1; i < p; i++ {
			v := g[i*p+j]
			for m := 0; m < j; m++ {
				v -= g[i*p+m] * g[j*p+m]
			}
			g[i*p+j] = v / d
		}
	}
	return nil
}

// solve solves L·Lᵀ·x = b with the factor from cholesky.
func solve(l []float64, p int, b []float64) []float64 {
	x := append([]float64(nil), b...)
	for i := 0; i < p; i++ {
		for m := 0; m < i; m++ {
			x[i] -= l[i*p+m] * x[m]
		}
		x[i] /= l[i*p+i]
	}
	for i := p - 1; i >= 0; i-- {
		for m := i + 1; m < p; m++ {
			x[i] -= l[m*p+i] * x[m]
		}
		x[i] /= l[i*p+i]
	}
	return x
}

// fit solves one channel's normal equations from its sums with the
// factored Gram matrix l of K harmonics.
func fit(s *sums, l []float64, k int) fitResult {
	p := 1 + 2*k
	b := make([]float64, p)
	b[0] = s.S0
	for h := 1; h <= k; h++ {
		// Σ w·x·cos = Re C, Σ w·x·sin = −Im C (C = Σ w·x·e^(−jkθn))
		b[2*h-1] = real(s.C[h-1])
		b[2*h] = -imag(s.C[h-1])
	}
	x := solve(l, p, b)
	var f fitResult
	f.dc = x[0]
	proj := 0.0
	for i := range b {
		proj += x[i] * b[i]
	}
	for h := 1; h <= k; h++ {
		f.ph[h-1] = complex(x[2*h-1], -x[2*h])
	}
	f.resid = max(s.Q-proj, 0)
	return f
}
