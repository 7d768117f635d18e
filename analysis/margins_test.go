package analysis

import (
	"errors"
	"math"
	"math/cmplx"
	"math/rand/v2"
	"strings"
	"testing"

	"pgregory.net/rapid"
)

// Margin tolerances required by the issue for 10 points per decade.
const (
	pmTolDeg = 0.1
	gmTolDB  = 0.05
)

// sweepOf samples L(jω) at ppd points per decade from fLo to fHi Hz,
// phases wrapped to (−180, 180] as a measurement gives them.
func sweepOf(L func(w float64) complex128, fLo, fHi float64, ppd int) []Point {
	var pts []Point
	for u := math.Log10(fLo); u <= math.Log10(fHi)+1e-9; u += 1 / float64(ppd) {
		f := math.Pow(10, u)
		l := L(2 * math.Pi * f)
		pts = append(pts, Point{FreqHz: f, GainDB: DBFromRatio(cmplx.Abs(l)), PhaseDeg: phaseDeg(l)})
	}
	return pts
}

func bisect(g func(float64) float64, lo, hi float64) float64 {
	glo := g(lo)
	for i := 0; i < 200; i++ {
		mid := 0.5 * (lo + hi)
		if (g(mid) > 0) == (glo > 0) {
			lo = mid
		} else {
			hi = mid
		}
	}
	return 0.5 * (lo + hi)
}

const radToHz = 1 / (2 * math.Pi)

// K/(s+1)³: phase crossover at ω = √3 where |L| = K/8, so GM = 8/K
// (REFERENCES.md closed form: 3·atan(√3) = 180°). Gain crossover where
// (1+ω²)^(3/2) = K: ω = sqrt(K^(2/3) − 1), PM = 180° − 3·atan(ω).
// The grid starts at an arbitrary offset so no crossing sits on a point.
func TestMarginsThirdOrderLag(t *testing.T) {
	for _, K := range []float64{1.5, 2, 4, 6, 7.5, 12} {
		L := func(w float64) complex128 { return complex(K, 0) / cmplx.Pow(complex(1, w), 3) }
		pts := sweepOf(L, 0.00137, 13.7, 10)
		m, err := ComputeMargins(pts)
		if err != nil {
			t.Fatal(err)
		}
		if len(m.PhaseCrossovers) != 1 || len(m.GainCrossovers) != 1 {
			t.Fatalf("K=%g: %d phase, %d gain crossovers; want 1, 1", K, len(m.PhaseCrossovers), len(m.GainCrossovers))
		}
		pc, gc := m.PhaseCrossovers[0], m.GainCrossovers[0]
		wantGM := DBFromRatio(8 / K)
		if !near(pc.GainMarginDB, wantGM, gmTolDB) || !near(pc.FreqHz, math.Sqrt(3)*radToHz, 1e-3*pc.FreqHz) {
			t.Errorf("K=%g: GM %.4f dB at %.5f Hz; closed form %.4f dB at %.5f Hz", K, pc.GainMarginDB, pc.FreqHz, wantGM, math.Sqrt(3)*radToHz)
		}
		wc := math.Sqrt(math.Pow(K, 2.0/3) - 1)
		wantPM := 180 - 3*math.Atan(wc)*180/math.Pi
		if !near(gc.PhaseMarginDeg, wantPM, pmTolDeg) {
			t.Errorf("K=%g: PM %.4f°, closed form %.4f°", K, gc.PhaseMarginDeg, wantPM)
		}
		if wantPM > 0 {
			dm := wantPM * math.Pi / 180 / wc
			if !near(gc.DelayMarginS, dm, 2e-3*dm) {
				t.Errorf("K=%g: delay margin %g s, closed form PM/ωc = %g s", K, gc.DelayMarginS, dm)
			}
		} else if gc.DelayMarginS != 0 {
			t.Errorf("K=%g: unstable loop has delay margin %g", K, gc.DelayMarginS)
		}
		t.Logf("K=%g: GM err %.2e dB, PM err %.2e°", K, pc.GainMarginDB-wantGM, gc.PhaseMarginDeg-wantPM)
		// modulus margin against a dense brute-force scan of the true L;
		// 1e-3: at 10 points per decade the cubic is off by about 1e-3 dB
		// and 1e-2° near the peak, which moves |1+L| ≈ |L|·2e-4 for |L| ≈ 1
		// plus the offset of the sampled peak
		mm := math.Inf(1)
		for u := -3.0; u <= 2; u += 1e-5 {
			mm = math.Min(mm, cmplx.Abs(1+L(2*math.Pi*math.Pow(10, u))))
		}
		if !near(m.ModulusMargin, mm, 1e-3) {
			t.Errorf("K=%g: modulus margin %.6f, dense scan %.6f", K, m.ModulusMargin, mm)
		}
	}
}

// K/(s(s+1)(s+2)): phase crossover at ω = √2 where |L| = K/6, GM = 6/K
// (REFERENCES.md closed form). Gain crossover solved by bisection of
// ω²(ω²+1)(ω²+4) = K², PM = 90° − atan(ω) − atan(ω/2).
func TestMarginsTypeOneThirdOrder(t *testing.T) {
	for _, K := range []float64{0.5, 1, 2, 3, 4.5, 9} {
		L := func(w float64) complex128 {
			s := complex(0, w)
			return complex(K, 0) / (s * (s + 1) * (s + 2))
		}
		m, err := ComputeMargins(sweepOf(L, 0.000731, 7.31, 10))
		if err != nil {
			t.Fatal(err)
		}
		if len(m.PhaseCrossovers) != 1 || len(m.GainCrossovers) != 1 {
			t.Fatalf("K=%g: %d phase, %d gain crossovers", K, len(m.PhaseCrossovers), len(m.GainCrossovers))
		}
		wantGM := DBFromRatio(6 / K)
		if got := m.PhaseCrossovers[0].GainMarginDB; !near(got, wantGM, gmTolDB) {
			t.Errorf("K=%g: GM %.4f dB, closed form %.4f dB", K, got, wantGM)
		}
		wc := bisect(func(w float64) float64 { w2 := w * w; return w2*(w2+1)*(w2+4) - K*K }, 1e-6, 100)
		wantPM := 90 - (math.Atan(wc)+math.Atan(wc/2))*180/math.Pi
		if got := m.GainCrossovers[0].PhaseMarginDeg; !near(got, wantPM, pmTolDeg) {
			t.Errorf("K=%g: PM %.4f°, closed form %.4f°", K, got, wantPM)
		}
		if !near(m.GainCrossovers[0].FreqHz, wc*radToHz, 1e-3*wc*radToHz) {
			t.Errorf("K=%g: crossover %g Hz, closed form %g Hz", K, m.GainCrossovers[0].FreqHz, wc*radToHz)
		}
	}
}

// Second-order loop ωn²/(s(s+2ζωn)): ωc = ωn·sqrt(sqrt(1+4ζ⁴) − 2ζ²),
// PM = atan(2ζωn/ωc) (Ogata; Franklin, Powell & Emami-Naeini; memory,
// confirmed by solving |L(jωc)| = 1 by hand). ωn = 2π·1 kHz.
func TestMarginsSecondOrderPM(t *testing.T) {
	const wn = 2 * math.Pi * 1000
	for _, z := range []float64{0.05, 0.1, 0.2, 0.3, 0.5, 0.707, 1, 2} {
		L := func(w float64) complex128 {
			s := complex(0, w)
			return complex(wn*wn, 0) / (s * (s + complex(2*z*wn, 0)))
		}
		m, err := ComputeMargins(sweepOf(L, 3.3, 330000, 10))
		if err != nil {
			t.Fatal(err)
		}
		if len(m.GainCrossovers) != 1 || len(m.PhaseCrossovers) != 0 {
			t.Fatalf("ζ=%g: %d gain, %d phase crossovers", z, len(m.GainCrossovers), len(m.PhaseCrossovers))
		}
		wc := wn * math.Sqrt(math.Sqrt(1+4*z*z*z*z)-2*z*z)
		want := math.Atan(2*z*wn/wc) * 180 / math.Pi
		gc := m.GainCrossovers[0]
		if !near(gc.PhaseMarginDeg, want, pmTolDeg) || !near(gc.FreqHz, wc*radToHz, 1e-3*wc*radToHz) {
			t.Errorf("ζ=%g: PM %.4f° at %.2f Hz; closed form %.4f° at %.2f Hz", z, gc.PhaseMarginDeg, gc.FreqHz, want, wc*radToHz)
		}
		if !near(secondOrderPMDeg(z), want, 1e-9) {
			t.Errorf("ζ=%g: secondOrderPMDeg %g, direct form %g", z, secondOrderPMDeg(z), want)
		}
	}
}

// Conditionally stable loop 10·(1+s)²/(s³·(1+s/100)²): phase starts at
// −270°, rises above −180° and falls back, so it crosses −180° twice, at
// the roots of atan(ω) − atan(ω/100) = 45°: 0.01ω² − 0.99ω + 1 = 0
// (closed form), with |L| > 1 at the lower one (negative GM) and |L| < 1
// at the upper one. |L(j10)| = 10·101/(1000·1.01) = 1: the gain crossover
// is at ω = 10 with PM = −90° + 2·atan(10) − 2·atan(0.1).
func TestMarginsConditionallyStable(t *testing.T) {
	L := func(w float64) complex128 {
		s := complex(0, w)
		return 10 * (1 + s) * (1 + s) / (s * s * s * (1 + s/100) * (1 + s/100))
	}
	m, err := ComputeMargins(sweepOf(L, 0.0013, 1300, 10))
	if err != nil {
		t.Fatal(err)
	}
	d := math.Sqrt(0.99*0.99 - 0.04)
	w1, w2 := (0.99-d)/0.02, (0.99+d)/0.02
	if len(m.PhaseCrossovers) != 2 || len(m.GainCrossovers) != 1 {
		t.Fatalf("%d phase, %d gain crossovers; want 2, 1", len(m.PhaseCrossovers), len(m.GainCrossovers))
	}
	for i, w := range []float64{w1, w2} {
		pc := m.PhaseCrossovers[i]
		want := -DBFromRatio(cmplx.Abs(L(w)))
		if !near(pc.FreqHz, w*radToHz, 1e-3*w*radToHz) || !near(pc.GainMarginDB, want, gmTolDB) {
			t.Errorf("crossing %d: GM %.4f dB at %.5f Hz; closed form %.4f dB at %.5f Hz", i, pc.GainMarginDB, pc.FreqHz, want, w*radToHz)
		}
	}
	if m.WorstGM != 0 || m.PhaseCrossovers[0].GainMarginDB >= 0 {
		t.Errorf("worst GM index %d, GM %v", m.WorstGM, m.PhaseCrossovers)
	}
	wantPM := -90 + 2*(math.Atan(10)-math.Atan(0.1))*180/math.Pi
	if gc := m.GainCrossovers[0]; !near(gc.PhaseMarginDeg, wantPM, pmTolDeg) || !near(gc.FreqHz, 10*radToHz, 1e-3) || m.WorstPM != 0 {
		t.Errorf("PM %.4f° at %g Hz, closed form %.4f° at %g Hz", gc.PhaseMarginDeg, gc.FreqHz, wantPM, 10*radToHz)
	}
}

// Worked arithmetic of the definitions (common practice, REFERENCES.md):
// −135° at 0 dB → PM 45°; −9 dB at −180° → GM 9 dB; +13 dB at −180° →
// GM −13 dB; −215° at 0 dB → PM −35° (unstable). The quantity not under
// test is held constant so interpolation is exact.
func TestMarginsWorkedArithmetic(t *testing.T) {
	pm := func(phase float64) float64 {
		m, err := ComputeMargins([]Point{{100, 6, phase, 0, 0}, {1000, -6, phase, 0, 0}})
		if err != nil || len(m.GainCrossovers) != 1 {
			t.Fatalf("phase %g: %+v %v", phase, m, err)
		}
		if !near(m.GainCrossovers[0].FreqHz, math.Sqrt(100*1000), 1e-6) {
			t.Errorf("crossover %g Hz, want the log midpoint 316.23 Hz", m.GainCrossovers[0].FreqHz)
		}
		return m.GainCrossovers[0].PhaseMarginDeg
	}
	gm := func(gain float64) float64 {
		m, err := ComputeMargins([]Point{{100, gain, -170, 0, 0}, {200, gain, -180, 0, 0}, {400, gain, -190, 0, 0}})
		if err != nil || len(m.PhaseCrossovers) != 1 {
			t.Fatalf("gain %g: %+v %v", gain, m, err)
		}
		return m.PhaseCrossovers[0].GainMarginDB
	}
	if got := pm(-135); !near(got, 45, 1e-9) {
		t.Errorf("−135° at 0 dB: PM %g, want 45", got)
	}
	if got := pm(-215); !near(got, -35, 1e-9) {
		t.Errorf("−215° at 0 dB: PM %g, want −35", got)
	}
	if got := pm(145); !near(got, -35, 1e-9) { // −215° as a wrapped reading
		t.Errorf("+145° (−215° wrapped) at 0 dB: PM %g, want −35", got)
	}
	if got := gm(-9); !near(got, 9, 1e-9) {
		t.Errorf("−9 dB at −180°: GM %g, want 9", got)
	}
	if got := gm(13); !near(got, -13, 1e-9) {
		t.Errorf("+13 dB at −180°: GM %g, want −13", got)
	}
	// a measured point exactly at −180°: the crossing is that point, from
	// either direction (gain linear in log f, so any interpolant is exact)
	for _, ph := range [][3]float64{{-170, -180, -190}, {-190, -180, -170}} {
		m, err := ComputeMargins([]Point{{100, -5, ph[0], 0, 0}, {200, -9, ph[1], 0, 0}, {400, -13, ph[2], 0, 0}})
		if err != nil || len(m.PhaseCrossovers) != 1 || !near(m.PhaseCrossovers[0].FreqHz, 200, 1e-9) || !near(m.PhaseCrossovers[0].GainMarginDB, 9, 1e-9) {
			t.Errorf("phases %v: %+v %v", ph, m.PhaseCrossovers, err)
		}
	}
	// and a point exactly at 0 dB is the gain crossover
	for _, g := range [][3]float64{{3, 0, -3}, {-3, 0, 3}} {
		m, err := ComputeMargins([]Point{{100, g[0], -100, 0, 0}, {200, g[1], -135, 0, 0}, {400, g[2], -170, 0, 0}})
		if err != nil || len(m.GainCrossovers) != 1 || !near(m.GainCrossovers[0].FreqHz, 200, 1e-9) || !near(m.GainCrossovers[0].PhaseMarginDeg, 45, 1e-9) {
			t.Errorf("gains %v: %+v %v", g, m.GainCrossovers, err)
		}
	}
}

// Reach: no crossing in the band is reported as where it is expected,
// never as a number.
func TestMarginsReach(t *testing.T) {
	line := func(g0, gslope, p0, pslope float64) []Point {
		var pts []Point
		for i := 0; i < 11; i++ {
			pts = append(pts, Point{FreqHz: 10 * math.Pow(10, float64(i)/10), GainDB: g0 + gslope*float64(i), PhaseDeg: p0 + pslope*float64(i)})
		}
		return pts
	}
	cases := []struct {
		name              string
		pts               []Point
		gain, phase       Reach
		nGain, nPhase     int
		modulusAtEdgeFreq float64
	}{
		// an integrator still above 0 dB at the top: crossover above
		{"high gain falling", line(40, -2, -90, 0), AboveBand, NotFound, 0, 0, 0},
		{"low gain falling", line(-10, -2, -100, -3), BelowBand, AboveBand, 0, 0, 0},
		{"high gain rising", line(10, 1, -170, 1), BelowBand, BelowBand, 0, 0, 0},
		{"flat", line(-3, 0, 0, 0), NotFound, NotFound, 0, 0, 0},
		{"low gain rising", line(-20, 1, -300, 0), AboveBand, NotFound, 0, 0, 0},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			m, err := ComputeMargins(c.pts)
			if err != nil {
				t.Fatal(err)
			}
			if len(m.GainCrossovers) != 0 || len(m.PhaseCrossovers) != 0 || m.WorstPM != -1 || m.WorstGM != -1 {
				t.Fatalf("unexpected crossings %+v", m)
			}
			if m.GainReach != c.gain || m.PhaseReach != c.phase {
				t.Errorf("reach gain %d phase %d, want %d %d", m.GainReach, m.PhaseReach, c.gain, c.phase)
			}
		})
	}
	// a trend within the points' uncertainty does not count
	pts := line(20, -0.01, -90, 0)
	for i := range pts {
		pts[i].GainSigmaDB = 0.1
	}
	if m, _ := ComputeMargins(pts); m.GainReach != NotFound {
		t.Errorf("trend inside the noise: reach %d, want NotFound", m.GainReach)
	}
}

// Uncertainty: the reported σ of PM, GM and the crossover frequencies
// must match the scatter of margins computed from points perturbed by
// their own σ (Monte Carlo, 3000 trials: sd known to 1.3%, tolerance 10%
// to cover the linearisation).
func TestMarginsUncertaintyMatchesScatter(t *testing.T) {
	L := func(w float64) complex128 { return complex(4, 0) / cmplx.Pow(complex(1, w), 3) }
	base := sweepOf(L, 0.0137, 13.7, 10)
	for i := range base {
		base[i].GainSigmaDB, base[i].PhaseSigmaDeg = 0.05, 0.5
	}
	m0, err := ComputeMargins(base)
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(13, 14))
	const trials = 3000
	var pm, pm2, gm, gm2, fc, fc2 float64
	pts := make([]Point, len(base))
	for k := 0; k < trials; k++ {
		for i, p := range base {
			p.GainDB += p.GainSigmaDB * rng.NormFloat64()
			p.PhaseDeg += p.PhaseSigmaDeg * rng.NormFloat64()
			pts[i] = p
		}
		m, err := ComputeMargins(pts)
		if err != nil || len(m.GainCrossovers) != 1 || len(m.PhaseCrossovers) != 1 {
			t.Fatalf("trial %d: %+v %v", k, m, err)
		}
		a, b, c := m.GainCrossovers[0].PhaseMarginDeg, m.PhaseCrossovers[0].GainMarginDB, m.GainCrossovers[0].FreqHz
		pm, pm2 = pm+a, pm2+a*a
		gm, gm2 = gm+b, gm2+b*b
		fc, fc2 = fc+c, fc2+c*c
	}
	sd := func(s, s2 float64) float64 { return math.Sqrt((s2 - s*s/trials) / (trials - 1)) }
	checks := []struct {
		name          string
		scatter, want float64
	}{
		{"PM", sd(pm, pm2), m0.GainCrossovers[0].SigmaDeg},
		{"GM", sd(gm, gm2), m0.PhaseCrossovers[0].SigmaDB},
		{"crossover frequency", sd(fc, fc2), m0.GainCrossovers[0].SigmaFreqHz},
	}
	for _, c := range checks {
		t.Logf("%s: scatter %.5g, reported %.5g", c.name, c.scatter, c.want)
		if r := c.scatter / c.want; r < 0.9 || r > 1.1 {
			t.Errorf("%s: scatter %.5g, reported σ %.5g (ratio %.3f)", c.name, c.scatter, c.want, r)
		}
	}
}

// Modulus-margin uncertainty: the reported σ of min |1+L| must match the
// scatter of the modulus margin computed from points perturbed by their
// own σ (Monte Carlo, 2000 trials: sd known to 1.6%, tolerance 10% to
// cover the linearisation). The σ differ from point to point and the
// minimum has |L|·sin φ and R + cos φ both away from zero, so both the
// gain and the phase terms count; the last case ends the sweep before the
// peak of |S|, so the minimum sits on the band edge.
func TestModulusSigmaMatchesScatter(t *testing.T) {
	third := func(w float64) complex128 { return complex(4, 0) / cmplx.Pow(complex(1, w), 3) }
	typeOne := func(w float64) complex128 {
		s := complex(0, w)
		return 2 / (s * (s + 1) * (s + 2))
	}
	cases := []struct {
		name     string
		L        func(w float64) complex128
		fLo, fHi float64
	}{
		{"4/(s+1)^3", third, 0.0137, 13.7},
		{"2/(s(s+1)(s+2))", typeOne, 0.0123, 12.3},
		{"4/(s+1)^3, band ends before the peak", third, 0.0137, 0.2},
	}
	for ci, c := range cases {
		base := sweepOf(c.L, c.fLo, c.fHi, 10)
		for i := range base {
			base[i].GainSigmaDB = 0.02 + 0.06*float64(i%4)/3
			base[i].PhaseSigmaDeg = 0.2 + 0.8*float64((i+1)%3)/2
		}
		m0, err := ComputeMargins(base)
		if err != nil {
			t.Fatal(err)
		}
		rng := rand.New(rand.NewPCG(21, uint64(ci)))
		const trials = 2000
		var sum, sum2 float64
		pts := make([]Point, len(base))
		for k := 0; k < trials; k++ {
			for i, p := range base {
				p.GainDB += p.GainSigmaDB * rng.NormFloat64()
				p.PhaseDeg += p.PhaseSigmaDeg * rng.NormFloat64()
				pts[i] = p
			}
			m, err := ComputeMargins(pts)
			if err != nil {
				t.Fatalf("%s trial %d: %v", c.name, k, err)
			}
			sum, sum2 = sum+m.ModulusMargin, sum2+m.ModulusMargin*m.ModulusMargin
		}
		scatter := math.Sqrt((sum2 - sum*sum/trials) / (trials - 1))
		t.Logf("%s: MM %.4f at %.4g Hz, scatter %.5g, reported %.5g", c.name, m0.ModulusMargin, m0.ModulusFreqHz, scatter, m0.ModulusSigma)
		if r := scatter / m0.ModulusSigma; !(r > 0.9 && r < 1.1) {
			t.Errorf("%s: scatter %.5g, reported σ %.5g (ratio %.3f)", c.name, scatter, m0.ModulusSigma, r)
		}
	}
}

// Modulus-margin uncertainty in closed form, on two-point sweeps whose
// minimum of |1+L| sits on the first point (|L| is the same at both, and
// the phase moves away from −180°, so |1+L| grows along the segment).
// With L = R·e^(jφ) at that point, D² = 1 + 2R·cos φ + R² (law of
// cosines), and R = 10^(g/20) gives dR/dg = R·ln10/20:
//   - φ = −180°: D = 1 − R, ∂D/∂g = −R·ln10/20, ∂D/∂φ = 0, so
//     σ = R·(ln10/20)·σg whatever σφ;
//   - φ = −90°: D = √(1+R²), ∂D/∂g = R²/D·ln10/20, ∂D/∂φ = R/D per radian.
func TestModulusSigmaClosedForm(t *testing.T) {
	const sg, sp = 0.1, 2.0 // dB, degrees
	ln := math.Ln10 / 20
	rad := math.Pi / 180
	r := math.Pow(10, -6.0206/20) // ≈ 0.5
	d := math.Sqrt(1 + r*r)
	cases := []struct {
		name           string
		g, ph0, ph1    float64
		wantMM, wantSD float64
	}{
		{"-6.02 dB at -180°", -6.0206, -180, -150, 1 - r, r * ln * sg},
		{"-20 dB at -180°", -20, 180, 160, 0.9, 0.1 * ln * sg},
		{"-6.02 dB at -90°", -6.0206, -90, -60, d, math.Hypot(r*r/d*ln*sg, r/d*rad*sp)},
	}
	for _, c := range cases {
		pts := []Point{
			{FreqHz: 100, GainDB: c.g, PhaseDeg: c.ph0, GainSigmaDB: sg, PhaseSigmaDeg: sp},
			{FreqHz: 200, GainDB: c.g, PhaseDeg: c.ph1, GainSigmaDB: sg, PhaseSigmaDeg: sp},
		}
		m, err := ComputeMargins(pts)
		if err != nil {
			t.Fatal(err)
		}
		if !near(m.ModulusMargin, c.wantMM, 1e-9) || !near(m.ModulusFreqHz, 100, 1e-6) {
			t.Errorf("%s: MM %.10f at %g Hz, want %.10f at 100 Hz", c.name, m.ModulusMargin, m.ModulusFreqHz, c.wantMM)
		}
		if !near(m.ModulusSigma, c.wantSD, 1e-9*c.wantSD) {
			t.Errorf("%s: σ(MM) %.10g, closed form %.10g", c.name, m.ModulusSigma, c.wantSD)
		}
	}
}

// Skogestad & Postlethwaite, Multivariable Feedback Control, 2nd ed.,
// §2.4 (memory): with Ms = max|1/(1+L)|, GM ≥ Ms/(Ms−1) and
// PM ≥ 2·asin(1/(2·Ms)). Checked on random stable loops K/(s+a)³
// (stable for K < 8a³) and K/(s(s+a)(s+b)) (Routh: K < ab(a+b)), densely
// sampled over a wide band so the peak of |S| is inside it.
func TestModulusMarginBounds(t *testing.T) {
	rapid.Check(t, func(rt *rapid.T) {
		var L func(w float64) complex128
		var lo, hi float64
		if rapid.Bool().Draw(rt, "type1") {
			a := rapid.Float64Range(0.1, 10).Draw(rt, "a")
			b := rapid.Float64Range(0.1, 10).Draw(rt, "b")
			K := rapid.Float64Range(0.02, 0.98).Draw(rt, "kfrac") * a * b * (a + b)
			L = func(w float64) complex128 {
				s := complex(0, w)
				return complex(K, 0) / (s * (s + complex(a, 0)) * (s + complex(b, 0)))
			}
			lo, hi = 1e-3*min(a, b), 1e3*max(a, b)
		} else {
			a := rapid.Float64Range(0.1, 10).Draw(rt, "a")
			K := rapid.Float64Range(0.02, 0.98).Draw(rt, "kfrac") * 8 * a * a * a
			L = func(w float64) complex128 { return complex(K, 0) / cmplx.Pow(complex(a, w), 3) }
			lo, hi = 1e-3*a, 1e3*a
		}
		m, err := ComputeMargins(sweepOf(L, lo*radToHz, hi*radToHz, 40))
		if err != nil {
			rt.Fatal(err)
		}
		ms := 1 / m.ModulusMargin
		if !(ms >= 1) {
			rt.Fatalf("Ms %g below 1", ms)
		}
		const rel = 1e-4 // interpolation error of MM and the margins at 40/decade
		for _, pc := range m.PhaseCrossovers {
			if gm, bound := RatioFromDB(pc.GainMarginDB), ms/(ms-1); gm < bound*(1-rel) {
				rt.Errorf("GM %g below Ms/(Ms−1) = %g (Ms %g)", gm, bound, ms)
			}
		}
		for _, gc := range m.GainCrossovers {
			if bound := 2 * math.Asin(1/(2*ms)) * 180 / math.Pi; gc.PhaseMarginDeg < bound*(1-rel) {
				rt.Errorf("PM %g° below 2·asin(1/(2Ms)) = %g° (Ms %g)", gc.PhaseMarginDeg, bound, ms)
			}
		}
	})
}

func TestMarginsBadInput(t *testing.T) {
	good := []Point{{100, 10, -90, 0, 0}, {1000, -10, -120, 0, 0}}
	bad := func(i int, mod func(*Point)) []Point {
		p := append([]Point(nil), good...)
		mod(&p[i])
		return p
	}
	cases := []struct {
		name string
		pts  []Point
		text string
	}{
		{"none", nil, "0 points"},
		{"one", good[:1], "1 points"},
		{"unsorted", []Point{good[1], good[0]}, "not above"},
		{"duplicate", []Point{good[0], good[0]}, "not above"},
		{"zero frequency", bad(0, func(p *Point) { p.FreqHz = 0 }), "frequency 0 Hz"},
		{"nan frequency", bad(1, func(p *Point) { p.FreqHz = math.NaN() }), "point 1: frequency NaN"},
		{"nan gain", bad(1, func(p *Point) { p.GainDB = math.NaN() }), "gain NaN dB"},
		{"inf phase", bad(0, func(p *Point) { p.PhaseDeg = math.Inf(-1) }), "phase -Inf"},
		{"negative sigma", bad(0, func(p *Point) { p.GainSigmaDB = -1 }), "uncertainties -1 dB"},
		{"nan sigma", bad(0, func(p *Point) { p.PhaseSigmaDeg = math.NaN() }), "NaN°"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, err := ComputeMargins(c.pts)
			if err == nil || !strings.Contains(err.Error(), c.text) {
				t.Errorf("error %v, want one naming %q", err, c.text)
			}
		})
	}
	if _, err := ComputeMargins(bad(1, func(p *Point) { p.GainDB = math.NaN() })); !errors.Is(err, ErrNonFinite) {
		t.Errorf("NaN gain is not ErrNonFinite: %v", err)
	}
}
