package analysis

import (
	"errors"
	"math"
	"math/cmplx"
	"math/rand/v2"
	"strings"
	"testing"

	"gonum.org/v1/gonum/dsp/fourier"
)

// numTol is the agreement expected between two float64 computations of
// the same sums over up to 1e5 samples (rounding grows like √N·ε).
const numTol = 1e-9

// synth returns dc + Σ amps[k]·cos(2π(k+1)f·n·dt + phs[k]) for n < n.
func synth(n int, dt, f, dc float64, amps, phs []float64) []float64 {
	x := make([]float64, n)
	for i := range x {
		v := dc
		for k := range amps {
			v += amps[k] * math.Cos(2*math.Pi*float64(k+1)*f*float64(i)*dt+phs[k])
		}
		x[i] = v
	}
	return x
}

func near(got, want, tol float64) bool { return math.Abs(got-want) <= tol }

// On a bin the rectangular whole-cycle fit is the DFT coefficient itself:
// phasor = 2·X[k]/N, DC = X[0]/N, for any record, tone or not. Values
// confirmed with reference to gonum's dsp/fourier FFT; the residual noise
// is checked by Parseval's theorem on the FFT's other bins.
func TestOnBinMatchesGonumFFT(t *testing.T) {
	const n = 4096
	const dt = 1e-5
	rng := rand.New(rand.NewPCG(1, 2))
	x := make([]float64, n)
	for i := range x {
		x[i] = 0.4 + rng.NormFloat64()
	}
	for i, v := range synth(n, dt, 37/(n*dt), 0, []float64{1.3, 0.02, 0.005}, []float64{0.3, -2, 1}) {
		x[i] += v
	}
	fft := fourier.NewFFT(n)
	X := fft.Coefficients(nil, x)
	for _, k := range []int{1, 5, 37, 300, 682, 683, 1000, 2047} {
		f := float64(k) / (n * dt)
		tone, err := EstimateTone(x, dt, f, ToneOptions{})
		if err != nil {
			t.Fatalf("bin %d: %v", k, err)
		}
		want := 2 * X[k] / n
		if cmplx.Abs(tone.Phasor-want) > numTol*cmplx.Abs(want) {
			t.Errorf("bin %d: phasor %v, FFT gives %v", k, tone.Phasor, want)
		}
		if !near(tone.DC, real(X[0])/n, numTol) {
			t.Errorf("bin %d: DC %g, FFT gives %g", k, tone.DC, real(X[0])/n)
		}
		if tone.N != n || !near(tone.Cycles, float64(k), 1e-9) {
			t.Errorf("bin %d: span %d samples, %g cycles; want %d, %d", k, tone.N, tone.Cycles, n, k)
		}
		// Parseval (one-sided): Σx² = (|X0|² + 2Σ|Xb|² + |X_{N/2}|²)/N.
		// The residual leaves out DC and the fitted harmonics' bins.
		fitted := map[int]bool{0: true, k: true}
		for h := 2; h <= tone.Harmonics; h++ {
			fitted[h*k] = true
		}
		resid := 0.0
		for b := 1; b < n/2; b++ {
			if !fitted[b] {
				resid += 2 * real(X[b]*cmplx.Conj(X[b])) / n
			}
		}
		if !fitted[n/2] {
			resid += real(X[n/2]*cmplx.Conj(X[n/2])) / n
		}
		p := 1 + 2*tone.Harmonics
		wantRMS := math.Sqrt(resid / float64(n-p))
		if !near(tone.NoiseRMS, wantRMS, 1e-9*wantRMS) {
			t.Errorf("bin %d: noise %g V rms, Parseval on the FFT gives %g", k, tone.NoiseRMS, wantRMS)
		}
		if tone.Harmonics >= 2 {
			h2 := 20 * math.Log10(cmplx.Abs(X[2*k])/cmplx.Abs(X[k]))
			if !near(tone.H2dBc, h2, 1e-6) {
				t.Errorf("bin %d: H2 %g dBc, FFT gives %g", k, tone.H2dBc, h2)
			}
		}
	}
}

// Off a bin the fit must return the synthesised amplitude, phase and DC:
// the synthesis is the independent reference. Rect fits the whole-cycle
// span (which need not be exactly whole); Hann the whole record, whole
// cycles or not, down to barely more than one cycle.
func TestOffBinMatchesSynthesis(t *testing.T) {
	const dt = 1e-6
	cases := []struct {
		name string
		n    int
		f    float64
		win  Window
	}{
		{"rect whole cycles", 10000, 1000, Rect},
		{"rect 7.3 samples per cycle", 1000, 1 / (7.3 * dt), Rect},
		{"rect irrational frequency", 20000, 1000 * math.Pi, Rect},
		{"rect near nyquist", 5000, 0.49 / dt, Rect},
		{"rect one and a half cycles", 1500, 1000, Rect},
		{"hann whole cycles", 10000, 1000, Hann},
		{"hann 12.34567 cycles", 10000, 1234.567, Hann},
		{"hann 1.3 cycles", 1300, 1000, Hann},
		{"hann near nyquist", 5000, 0.45 / dt, Hann},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			const amp, ph, dc = 0.75, -2.1, 3.3
			x := synth(c.n, dt, c.f, dc, []float64{amp, 0.01, 0.003}, []float64{ph, 0.5, -1})
			tone, err := EstimateTone(x, dt, c.f, ToneOptions{Window: c.win})
			if err != nil {
				t.Fatal(err)
			}
			// the harmonics above Nyquist alias; leave them out of x
			// when the fit cannot include them
			if tone.Harmonics < 3 {
				amps := []float64{amp, 0.01, 0.003}[:tone.Harmonics]
				x = synth(c.n, dt, c.f, dc, amps, []float64{ph, 0.5, -1})
				if tone, err = EstimateTone(x, dt, c.f, ToneOptions{Window: c.win}); err != nil {
					t.Fatal(err)
				}
			}
			if !near(tone.AmpPeak, amp, 1e-8) || !near(tone.PhaseRad, ph, 1e-8) || !near(tone.DC, dc, 1e-8) {
				t.Errorf("got %g V at %g rad, DC %g V; synthesised %g V at %g rad, DC %g V", tone.AmpPeak, tone.PhaseRad, tone.DC, amp, ph, dc)
			}
			if c.win == Rect {
				if frac := math.Abs(tone.Cycles - math.Round(tone.Cycles)); frac > spanTolCycles {
					t.Logf("span %d samples holds %.6f cycles (no span within %g cycle)", tone.N, tone.Cycles, spanTolCycles)
				}
			} else if tone.N != c.n {
				t.Errorf("Hann used %d samples of %d", tone.N, c.n)
			}
			if tone.Harmonics >= 2 && !near(tone.H2dBc, 20*math.Log10(0.01/amp), 1e-5) {
				t.Errorf("H2 %g dBc, synthesised %g", tone.H2dBc, 20*math.Log10(0.01/amp))
			}
			if tone.Harmonics >= 3 && !near(tone.H3dBc, 20*math.Log10(0.003/amp), 1e-5) {
				t.Errorf("H3 %g dBc, synthesised %g", tone.H3dBc, 20*math.Log10(0.003/amp))
			}
		})
	}
}

// The pair estimator refers both phases to the same first sample and
// gives the same numbers as two single-channel calls.
func TestPairMatchesSingle(t *testing.T) {
	const dt, f, n = 1e-6, 2345.6, 30000
	rng := rand.New(rand.NewPCG(3, 4))
	x := synth(n, dt, f, 0.1, []float64{1}, []float64{0.2})
	y := synth(n, dt, f, -0.1, []float64{0.3}, []float64{2.9})
	for i := range x {
		x[i] += 0.01 * rng.NormFloat64()
		y[i] += 0.01 * rng.NormFloat64()
	}
	for _, w := range []Window{Rect, Hann} {
		o := ToneOptions{Window: w}
		a, b, err := EstimatePair(x, y, dt, f, o, o)
		if err != nil {
			t.Fatal(err)
		}
		a1, _ := EstimateTone(x, dt, f, o)
		b1, _ := EstimateTone(y, dt, f, o)
		for _, p := range [][2]Tone{{a, a1}, {b, b1}} {
			if cmplx.Abs(p[0].Phasor-p[1].Phasor) > numTol || !near(p[0].NoiseRMS, p[1].NoiseRMS, numTol) || p[0].N != p[1].N {
				t.Errorf("window %d: pair %+v, single %+v", w, p[0], p[1])
			}
		}
	}
	// different windows: estimated separately, still both valid
	a, b, err := EstimatePair(x, y, dt, f, ToneOptions{Window: Rect}, ToneOptions{Window: Hann})
	if err != nil || !near(a.AmpPeak, 1, 1e-3) || !near(b.AmpPeak, 0.3, 1e-3) {
		t.Errorf("mixed windows: %v %v %v", a.AmpPeak, b.AmpPeak, err)
	}
}

// A first-order low pass 1/(1+s/ωp) is −3.0103 dB and −45° at ωp
// (closed form: |H| = 1/√2, angle = −atan(1)). The filter is integrated
// in time (RK4, 2000 steps a cycle, error ~1e-12) and measured by the
// estimator, so the chain sample → fit → Ratio is checked end to end.
func TestFirstOrderLowPassCorner(t *testing.T) {
	const fp = 1000.0
	const dt = 1 / (fp * 2000)
	wp := 2 * math.Pi * fp
	const settle, cycles = 40, 20 // 40 cycles ≫ 1/(2π) cycle time constant
	n := (settle + cycles) * 2000
	in := make([]float64, n)
	out := make([]float64, n)
	u := func(t float64) float64 { return math.Cos(2 * math.Pi * fp * t) }
	dy := func(t, y float64) float64 { return wp * (u(t) - y) }
	y := 0.0
	for i := 0; i < n; i++ {
		tt := float64(i) * dt
		in[i], out[i] = u(tt), y
		k1 := dy(tt, y)
		k2 := dy(tt+dt/2, y+dt/2*k1)
		k3 := dy(tt+dt/2, y+dt/2*k2)
		k4 := dy(tt+dt, y+dt*k3)
		y += dt / 6 * (k1 + 2*k2 + 2*k3 + k4)
	}
	s := settle * 2000
	a, b, err := EstimatePair(in[s:], out[s:], dt, fp, ToneOptions{}, ToneOptions{})
	if err != nil {
		t.Fatal(err)
	}
	h := Ratio(a, b)
	// closed form −20·log10(√2) = −3.0103 dB; tolerance covers the
	// 4-digit figure and the RK4 error
	if !near(h.GainDB, -3.0103, 5e-5) || !near(h.PhaseDeg, -45, 1e-6) {
		t.Errorf("corner: %.6f dB %.6f°, want −3.0103 dB −45°", h.GainDB, h.PhaseDeg)
	}
}

// White noise of known σ: NoiseRMS must estimate σ, and SNRdB must be the
// tone power over the noise in the window's ENBW: N·A²/(2σ²) for Rect,
// N·A²/(2σ²·1.5) for Hann (ENBW 1.5 bins, Harris 1978).
func TestNoiseAndSNR(t *testing.T) {
	const n, dt, f, amp, sigma = 100000, 1e-6, 5000, 0.2, 0.05
	rng := rand.New(rand.NewPCG(5, 6))
	x := synth(n, dt, f, 1, []float64{amp}, []float64{0.4})
	for i := range x {
		x[i] += sigma * rng.NormFloat64()
	}
	for _, c := range []struct {
		w    Window
		enbw float64
	}{{Rect, 1}, {Hann, 1.5}} {
		tone, err := EstimateTone(x, dt, f, ToneOptions{Window: c.w})
		if err != nil {
			t.Fatal(err)
		}
		// σ̂ of N Gaussian samples has relative sd 1/√(2N) = 0.22%; 1% is
		// 4.5 sd.
		if !near(tone.NoiseRMS, sigma, 0.01*sigma) {
			t.Errorf("window %d: noise %g V rms, want %g", c.w, tone.NoiseRMS, sigma)
		}
		want := 10 * math.Log10(n*amp*amp/(2*sigma*sigma*c.enbw))
		// 0.1 dB holds the σ̂ spread (0.02 dB) and the amplitude's (1e-3 dB)
		if !near(tone.SNRdB, want, 0.1) {
			t.Errorf("window %d: SNR %.3f dB, want %.3f", c.w, tone.SNRdB, want)
		}
	}
}

// Monte-Carlo efficiency: x = A·cos(2πf0·n + φ) + w, white Gaussian w of
// variance σ², known f0, whole cycles, rectangular window. The
// Cramér–Rao bounds are var(Â) ≥ 2σ²/N and var(φ̂) ≥ 2σ²/(N·A²) (Kay,
// Fundamentals of Statistical Signal Processing vol. I, 1993; memory,
// confirmed by the Fisher information of the orthogonal cos/sin design).
// Target: variance/CRLB ≤ 1.05. With T trials the sample variance has
// relative sd √(2/T) = 1.2% at T = 15000, so [0.95, 1.05] is 4 sd wide
// either side; the seed is fixed, so the run is repeatable.
func TestCramerRaoEfficiency(t *testing.T) {
	const n, trials, amp, sigma = 1000, 15000, 1.0, 0.1
	const dt, f, phi = 1.0, 0.013, 0.9 // 13 cycles
	clean := synth(n, dt, f, 0, []float64{amp}, []float64{phi})
	rng := rand.New(rand.NewPCG(7, 8))
	x := make([]float64, n)
	var sa, saa, sp, spp, snr float64
	for i := 0; i < trials; i++ {
		for j := range x {
			x[j] = clean[j] + sigma*rng.NormFloat64()
		}
		tone, err := EstimateTone(x, dt, f, ToneOptions{})
		if err != nil {
			t.Fatal(err)
		}
		d := tone.PhaseRad - phi
		sa += tone.AmpPeak
		saa += tone.AmpPeak * tone.AmpPeak
		sp += d
		spp += d * d
		snr += snrLinear(tone)
	}
	T := float64(trials)
	varA := (saa - sa*sa/T) / (T - 1)
	varP := (spp - sp*sp/T) / (T - 1)
	crlbA := 2 * sigma * sigma / n
	crlbP := 2 * sigma * sigma / (n * amp * amp)
	rA, rP := varA/crlbA, varP/crlbP
	t.Logf("amplitude variance / CRLB = %.4f, phase variance / CRLB = %.4f (%d trials, N = %d)", rA, rP, trials, n)
	for _, r := range []float64{rA, rP} {
		if r < 0.95 || r > 1.05 {
			t.Errorf("variance / CRLB = %.4f, want within [0.95, 1.05]", r)
		}
	}
	// The reported SNR predicts the same variance: var(φ̂) = 1/SNR.
	meanSNR := snr / T
	if p := 1 / meanSNR / crlbP; p < 0.97 || p > 1.03 {
		t.Errorf("1/SNR = %.4g rad², CRLB %.4g rad²: ratio %.4f", 1/meanSNR, crlbP, p)
	}
}

// LoopGain's PhaseSigmaDeg and GainSigmaDB must match the scatter of
// repeated measurements (standard uncertainty means one sd). 4000 trials
// give the sd to 1.1%; tolerance 5% (4.5 sd).
func TestLoopGainUncertaintyMatchesScatter(t *testing.T) {
	const n, trials, dt, f = 2000, 4000, 1.0, 0.01
	cx := synth(n, dt, f, 0, []float64{0.5}, []float64{0})
	cy := synth(n, dt, f, 0, []float64{0.8}, []float64{2.5})
	rng := rand.New(rand.NewPCG(9, 10))
	x, y := make([]float64, n), make([]float64, n)
	var sg, sgg, sp, spp, sigG, sigP float64
	for i := 0; i < trials; i++ {
		for j := range x {
			x[j] = cx[j] + 0.05*rng.NormFloat64()
			y[j] = cy[j] + 0.2*rng.NormFloat64()
		}
		a, b, err := EstimatePair(x, y, dt, f, ToneOptions{}, ToneOptions{})
		if err != nil {
			t.Fatal(err)
		}
		l := LoopGain(a, b)
		sg += l.GainDB
		sgg += l.GainDB * l.GainDB
		sp += l.PhaseDeg
		spp += l.PhaseDeg * l.PhaseDeg
		sigG += l.GainSigmaDB
		sigP += l.PhaseSigmaDeg
	}
	T := float64(trials)
	sdG := math.Sqrt((sgg - sg*sg/T) / (T - 1))
	sdP := math.Sqrt((spp - sp*sp/T) / (T - 1))
	t.Logf("gain sd %.5f dB vs reported %.5f; phase sd %.5f° vs reported %.5f°", sdG, sigG/T, sdP, sigP/T)
	if r := sdG / (sigG / T); r < 0.95 || r > 1.05 {
		t.Errorf("gain scatter / reported sigma = %.4f", r)
	}
	if r := sdP / (sigP / T); r < 0.95 || r > 1.05 {
		t.Errorf("phase scatter / reported sigma = %.4f", r)
	}
	// L = −y/x: gain 20·log10(0.8/0.5), phase 2.5 rad + 180° wrapped
	if !near(sg/T, 20*math.Log10(0.8/0.5), 0.01) || !near(sp/T, WrapDeg(2.5*180/math.Pi+180), 0.05) {
		t.Errorf("mean loop gain %g dB %g°", sg/T, sp/T)
	}
}

func TestHarmonicsAndClip(t *testing.T) {
	const dt, n = 1e-6, 10000
	// −40 dBc and −60 dBc by construction (0.01 and 0.001 of 1 V)
	x := synth(n, dt, 1000, 0, []float64{1, 0.01, 0.001}, []float64{0, 1, 2})
	tone, err := EstimateTone(x, dt, 1000, ToneOptions{ClipLow: -1.5, ClipHigh: 1.5})
	if err != nil {
		t.Fatal(err)
	}
	if !near(tone.H2dBc, -40, 1e-6) || !near(tone.H3dBc, -60, 1e-6) || tone.Clipped {
		t.Errorf("H2 %g dBc, H3 %g dBc, clipped %v; want −40, −60, false", tone.H2dBc, tone.H3dBc, tone.Clipped)
	}
	// a sample at the limit counts as clipped; the peak is 1.011 V at n=0
	if tone, _ = EstimateTone(x, dt, 1000, ToneOptions{ClipLow: -2, ClipHigh: x[0]}); !tone.Clipped {
		t.Error("sample at ClipHigh not flagged")
	}
	// 3f above Nyquist: H3 not fitted, floor, Harmonics = 2
	f := 0.2 / dt
	tone, err = EstimateTone(synth(n, dt, f, 0, []float64{1, 0.1}, []float64{0, 0}), dt, f, ToneOptions{})
	if err != nil || tone.Harmonics != 2 || tone.H3dBc != HarmonicFloorDBc || !near(tone.H2dBc, -20, 1e-6) {
		t.Errorf("f = 0.2 fs: harmonics %d, H2 %g, H3 %g, err %v", tone.Harmonics, tone.H2dBc, tone.H3dBc, err)
	}
	tone, err = EstimateTone(x, dt, 1000, ToneOptions{SkipHarmonics: true})
	if err != nil || tone.Harmonics != 1 || tone.H2dBc != HarmonicFloorDBc {
		t.Errorf("SkipHarmonics: %+v %v", tone, err)
	}
	// a silent record: no tone, finite numbers
	tone, err = EstimateTone(make([]float64, 100), dt, 20000, ToneOptions{})
	if err != nil || tone.SNRdB != -SNRCapDB || tone.AmpPeak != 0 {
		t.Errorf("zeros: %+v %v", tone, err)
	}
}

func TestToneBadInput(t *testing.T) {
	ok := synth(1000, 1e-3, 10, 0, []float64{1}, []float64{0})
	withNaN := append([]float64(nil), ok...)
	withNaN[500] = math.NaN()
	tailInf := append([]float64(nil), ok...)
	tailInf[999] = math.Inf(1) // past the 10-cycle span? 1000 samples are whole; still scanned
	huge := append([]float64(nil), ok...)
	huge[3] = 1e300
	cases := []struct {
		name string
		x    []float64
		dt   float64
		f    float64
		opt  ToneOptions
		is   error
		text string
	}{
		{"empty", nil, 1e-3, 10, ToneOptions{}, nil, "empty"},
		{"nan sample", withNaN, 1e-3, 10, ToneOptions{}, ErrNonFinite, "sample 500"},
		{"inf sample", tailInf, 1e-3, 10, ToneOptions{Window: Hann}, ErrNonFinite, "sample 999"},
		{"overflow", huge, 1e-3, 10, ToneOptions{}, ErrNonFinite, "overflow"},
		{"zero dt", ok, 0, 10, ToneOptions{}, nil, "sample interval 0"},
		{"negative dt", ok, -1, 10, ToneOptions{}, nil, "sample interval -1"},
		{"nan dt", ok, math.NaN(), 10, ToneOptions{}, nil, "sample interval NaN"},
		{"zero f", ok, 1e-3, 0, ToneOptions{}, nil, "frequency 0"},
		{"negative f", ok, 1e-3, -5, ToneOptions{}, nil, "frequency -5"},
		{"inf f", ok, 1e-3, math.Inf(1), ToneOptions{}, nil, "frequency +Inf"},
		{"at nyquist", ok, 1e-3, 500, ToneOptions{}, ErrNyquist, "Nyquist 500"},
		{"above nyquist", ok, 1e-3, 700, ToneOptions{}, ErrNyquist, "700 Hz"},
		{"under one cycle rect", ok, 1e-3, 0.9, ToneOptions{}, ErrNoCycles, "0.9 cycles"},
		{"under one cycle hann", ok, 1e-3, 0.5, ToneOptions{Window: Hann}, ErrNoCycles, "0.5 cycles"},
		{"clip window", ok, 1e-3, 10, ToneOptions{ClipLow: 1, ClipHigh: -1}, nil, "clip window 1 V to -1 V"},
		{"unknown window", ok, 1e-3, 10, ToneOptions{Window: 7}, nil, "unknown window 7"},
		{"too short", []float64{1, 0, -1}, 1, 0.4, ToneOptions{}, nil, "no residual"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, err := EstimateTone(c.x, c.dt, c.f, c.opt)
			if err == nil {
				t.Fatal("no error")
			}
			if c.is != nil && !errors.Is(err, c.is) {
				t.Errorf("error %q is not %v", err, c.is)
			}
			if !strings.Contains(err.Error(), c.text) {
				t.Errorf("error %q does not name %q", err, c.text)
			}
		})
	}
	if _, _, err := EstimatePair(ok, ok[:999], 1e-3, 10, ToneOptions{}, ToneOptions{}); err == nil || !strings.Contains(err.Error(), "1000 and 999") {
		t.Errorf("length mismatch: %v", err)
	}
	if _, _, err := EstimatePair(ok, withNaN, 1e-3, 10, ToneOptions{}, ToneOptions{}); !errors.Is(err, ErrNonFinite) || !strings.Contains(err.Error(), "channel 2") {
		t.Errorf("NaN on channel 2: %v", err)
	}
}

// WholeCycleSpan against a brute-force search of every m ≤ n.
func TestWholeCycleSpan(t *testing.T) {
	brute := func(n int, r float64) int {
		for m := n; m >= 1; m-- {
			c := float64(m) * r
			if k := math.Round(c); k >= 1 && math.Abs(c-k) <= math.Min(spanTolCycles, r/2) {
				return m
			}
		}
		return 0
	}
	rng := rand.New(rand.NewPCG(11, 12))
	for i := 0; i < 2000; i++ {
		n := 10 + rng.IntN(5000)
		spc := 2.01 + rng.Float64()*200 // samples per cycle
		if i%3 == 0 {
			spc = math.Round(spc*10) / 10 // rational: exact spans exist
		}
		r := 1 / spc
		if float64(n)*r < 1 {
			continue
		}
		got, err := WholeCycleSpan(n, 1, r)
		if err != nil {
			t.Fatalf("n=%d spc=%g: %v", n, spc, err)
		}
		want := brute(n, r)
		kmax := math.Floor(float64(n)*r + spanTolCycles)
		if want > 0 && float64(want)*r >= math.Floor(kmax/2)-0.5 {
			if got != want {
				t.Errorf("n=%d spc=%g: span %d, brute force %d", n, spc, got, want)
			}
		} else if got < 1 || got > n {
			t.Errorf("n=%d spc=%g: fallback span %d out of range", n, spc, got)
		}
	}
	if m, err := WholeCycleSpan(1000, 1e-3, 10); err != nil || m != 1000 {
		t.Errorf("10 whole cycles: %d %v", m, err)
	}
	// 7.3 samples a cycle in 100 samples: 73 samples hold exactly 10
	if m, err := WholeCycleSpan(100, 1, 1/7.3); err != nil || m != 73 {
		t.Errorf("7.3 samples a cycle: %d %v", m, err)
	}
	if _, err := WholeCycleSpan(5, 1, 0.1); !errors.Is(err, ErrNoCycles) {
		t.Errorf("half a cycle: %v", err)
	}
}

// Hann over whole cycles, tone on bin k ≥ 2: the fit equals the textbook
// windowed single-bin DFT normalised by the coherent gain 0.5 (Harris
// 1978): 2/(N·0.5)·Σ w[n]·x[n]·e^(−j2πkn/N), w the periodic Hann window,
// computed here directly, sample by sample.
func TestHannCoherentGain(t *testing.T) {
	const n, k = 2000, 17
	rng := rand.New(rand.NewPCG(15, 16))
	x := synth(n, 1, float64(k)/n, 0.5, []float64{0.8}, []float64{1.1})
	for i := range x {
		x[i] += 0.05 * rng.NormFloat64()
	}
	var sum complex128
	for i, v := range x {
		w := 0.5 - 0.5*math.Cos(2*math.Pi*float64(i)/n)
		sum += complex(w*v, 0) * cmplx.Exp(complex(0, -2*math.Pi*float64(k*i)/n))
	}
	want := 2 / (n * 0.5) * sum
	tone, err := EstimateTone(x, 1, float64(k)/n, ToneOptions{Window: Hann})
	if err != nil {
		t.Fatal(err)
	}
	if cmplx.Abs(tone.Phasor-want) > 1e-9 {
		t.Errorf("Hann phasor %v, windowed DFT %v", tone.Phasor, want)
	}
}

// Long records: the block tables and per-block turns keep the phase
// within 1e-9 rad of the synthesis over 1e6 samples, where a free-running
// rotating phasor accumulates about n·ε of drift. The synthesis itself
// rounds its argument (up to 8e3 rad) to about 1e-12 rad.
func TestLongRecordAccuracy(t *testing.T) {
	const n, dt = 1_000_000, 1e-6
	f := 1234.5678 // off bin, not whole cycles
	x := synth(n, dt, f, 0, []float64{1}, []float64{-0.3})
	for _, w := range []Window{Rect, Hann} {
		tone, err := EstimateTone(x, dt, f, ToneOptions{Window: w, SkipHarmonics: true})
		if err != nil {
			t.Fatal(err)
		}
		if !near(tone.PhaseRad, -0.3, 1e-9) || !near(tone.AmpPeak, 1, 1e-9) {
			t.Errorf("window %d: %.12f V at %.12f rad, synthesised 1 V at −0.3 rad", w, tone.AmpPeak, tone.PhaseRad)
		}
		t.Logf("window %d: phase error %.2e rad, amplitude error %.2e", w, tone.PhaseRad+0.3, tone.AmpPeak-1)
	}
}
