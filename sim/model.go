package sim

import (
	"fmt"
	"math"
	"math/cmplx"
	"sort"

	"gonum.org/v1/gonum/mat"
)

// poly is a real polynomial in s, coefficients in ascending powers.
type poly []float64

func (p poly) mul(q poly) poly {
	out := make(poly, len(p)+len(q)-1)
	for i, a := range p {
		for j, b := range q {
			out[i+j] += a * b
		}
	}
	return out
}

func (p poly) add(q poly) poly {
	n := max(len(p), len(q))
	out := make(poly, n)
	for i := range out {
		if i < len(p) {
			out[i] += p[i]
		}
		if i < len(q) {
			out[i] += q[i]
		}
	}
	return out
}

func (p poly) scale(k float64) poly {
	out := make(poly, len(p))
	for i, a := range p {
		out[i] = a * k
	}
	return out
}

// eval evaluates p at s by Horner's rule.
func (p poly) eval(s complex128) complex128 {
	var v complex128
	for i := len(p) - 1; i >= 0; i-- {
		v = v*s + complex(p[i], 0)
	}
	return v
}

// roots returns the roots of p as the eigenvalues of its companion
// matrix, computed with s scaled by w (rad/s) for conditioning.
func (p poly) roots(w float64) []complex128 {
	q := append(poly(nil), p...)
	for len(q) > 1 && q[len(q)-1] == 0 {
		q = q[:len(q)-1]
	}
	n := len(q) - 1
	if n < 1 {
		return nil
	}
	c := make([]float64, n+1) // coefficients in z = s/w
	for i := range c {
		c[i] = q[i] * math.Pow(w, float64(i))
	}
	m := mat.NewDense(n, n, nil)
	for j := 0; j < n; j++ {
		m.Set(0, j, -c[n-1-j]/c[n])
	}
	for i := 1; i < n; i++ {
		m.Set(i, i-1, 1)
	}
	var e mat.Eigen
	if !e.Factorize(m, mat.EigenNone) {
		return nil
	}
	z := e.Values(nil)
	for i := range z {
		z[i] *= complex(w, 0)
	}
	return z
}

// rational is N(s)/D(s)·e^(−s·Td).
type rational struct {
	num, den poly
	delayS   float64
}

func (r rational) eval(s complex128) complex128 {
	return r.num.eval(s) / r.den.eval(s) * cmplx.Exp(-s*complex(r.delayS, 0))
}

// plant returns the buck's duty-to-output transfer function for load R:
// the averaged switch is a source V_in·d driving L (with DCR r_L) into R
// in parallel with C (with ESR r_C):
//
//	Gvd(s) = V_in·Zp/(sL + r_L + Zp),  Zp = R(1 + s·C·r_C)/(1 + s·C(R + r_C)).
//
// With r_L = r_C = 0 this is Erickson & Maksimović's
// V/D · 1/(1 + s/(Q·ω0) + (s/ω0)²), ω0 = 1/√(LC), Q = R·√(C/L).
func (s *Scenario) plant(loadOhm float64) (num, den poly) {
	R, L, C := loadOhm, s.InductanceH, s.CapacitanceF
	zpNum := poly{R, R * C * s.ESROhm}
	zpDen := poly{1, C * (R + s.ESROhm)}
	num = zpNum.scale(s.VinV)
	den = poly{s.InductorROhm, L}.mul(zpDen).add(zpNum)
	return num, den
}

// compensator returns Gc(s) = N/D, which for the poles/zeros form
// includes the divider ratio H (the sensing gain).
func (s *Scenario) compensator() (num, den poly) {
	c := s.Comp
	if !c.ByComponents {
		h := s.RBottomOhm / (s.RTopOhm + s.RBottomOhm)
		num = poly{2 * math.Pi * c.IntegratorHz * h}
		den = poly{0, 1}
		for _, z := range c.ZerosHz {
			num = num.mul(poly{1, 1 / (2 * math.Pi * z)})
		}
		for _, p := range c.PolesHz {
			den = den.mul(poly{1, 1 / (2 * math.Pi * p)})
		}
		return num, den
	}
	// Zf = (1 + s·R2·C1) / (s·(C1+C2)·(1 + s·R2·C1·C2/(C1+C2))).
	c12 := c.C1F + c.C2F
	num = poly{1, c.R2Ohm * c.C1F}
	den = poly{0, c12}.mul(poly{1, c.R2Ohm * c.C1F * c.C2F / c12})
	r1 := s.RTopOhm
	if c.Type == "III" {
		// 1/Zin = (1 + s·(R1+R3)·C3) / (R1·(1 + s·R3·C3)).
		num = num.mul(poly{1, (r1 + c.R3Ohm) * c.C3F})
		den = den.mul(poly{r1, r1 * c.R3Ohm * c.C3F})
	} else {
		den = den.scale(r1)
	}
	return num, den
}

// loop returns L(s) for the operating point: Gc·Gvd/V_M·e^(−s·Td).
func (s *Scenario) loop(loadOhm float64) rational {
	pn, pd := s.plant(loadOhm)
	cn, cd := s.compensator()
	return rational{num: pn.mul(cn), den: pd.mul(cd).scale(s.RampVpp), delayS: s.DelayS}
}

// Loop returns L(j2πf) at the operating point named load ("" the first)
// in the control convention: the loop is stable-looking when
// 1 + L has no zeros in the right half plane, and phase margin is
// 180° + ∠L at |L| = 1.
func (s *Scenario) Loop(load string, f float64) (complex128, error) {
	op, err := s.point(load)
	if err != nil {
		return 0, err
	}
	if !(f > 0) || math.IsInf(f, 0) {
		return 0, fmt.Errorf("loop gain at %g Hz: not a positive finite frequency", f)
	}
	l := s.loop(op.LoadOhm).eval(complex(0, 2*math.Pi*f))
	if cmplx.IsNaN(l) || cmplx.IsInf(l) {
		return 0, fmt.Errorf("loop gain at %g Hz: %v, the scenario's values overflow", f, l)
	}
	return l, nil
}

// GainCrossing is one frequency where |L| = 1.
type GainCrossing struct {
	FreqHz         float64
	PhaseMarginDeg float64 // 180° + ∠L wrapped to (−180°, 180°]
}

// PhaseCrossing is one frequency where ∠L = −180° + k·360°.
type PhaseCrossing struct {
	FreqHz       float64
	GainMarginDB float64 // −20·log10|L|
}

// TrueMargins are the margins of the continuous model. The pointers are
// nil when there is no crossing in the searched band (1 Hz to half the
// switching frequency, where the averaged model holds);
// with several crossings they hold the worst (smallest) margin.
type TrueMargins struct {
	CrossoverHz      *float64
	PhaseMarginDeg   *float64
	PhaseCrossoverHz *float64
	GainMarginDB     *float64
	Gain             []GainCrossing
	Phase            []PhaseCrossing
	// StableClosedLoop reports whether every root of D+N (the delay as a
	// second-order Padé approximant) has a negative real part.
	StableClosedLoop bool
}

// Search band and density of the true-margin scan.
const (
	marginLoHz      = 1.0
	marginPerDecade = 4000
)

// TrueMargins finds every gain and phase crossing of L(j2πf) between
// 1 Hz and f_sw/2 by a dense logarithmic scan (4000 points per decade)
// with bisection to 1e-12 relative in frequency. Phase is unwrapped
// along the scan from its principal value at 1 Hz.
func (s *Scenario) TrueMargins(load string) (TrueMargins, error) {
	op, err := s.point(load)
	if err != nil {
		return TrueMargins{}, err
	}
	r := s.loop(op.LoadOhm)
	return trueMargins(r, s.SwitchingHz/2), nil
}

func trueMargins(r rational, hiHz float64) TrueMargins {
	var tm TrueMargins
	eval := func(f float64) complex128 { return r.eval(complex(0, 2*math.Pi*f)) }
	n := int(math.Round(math.Log10(hiHz/marginLoHz) * marginPerDecade))
	fAt := func(i int) float64 { return marginLoHz * math.Pow(10, float64(i)/marginPerDecade) }
	// unwrapped phase in degrees near a reference
	near := func(ph, ref float64) float64 {
		return ph + 360*math.Round((ref-ph)/360)
	}
	prevF := fAt(0)
	prevL := eval(prevF)
	prevG := cmplx.Abs(prevL)
	prevP := cmplx.Phase(prevL) * 180 / math.Pi
	for i := 1; i <= n; i++ {
		f := fAt(i)
		l := eval(f)
		g := cmplx.Abs(l)
		p := near(cmplx.Phase(l)*180/math.Pi, prevP)
		if (prevG-1)*(g-1) <= 0 && prevG != g {
			fc := bisect(prevF, f, func(x float64) float64 { return cmplx.Abs(eval(x)) - 1 }, prevG-1)
			ph := cmplx.Phase(eval(fc)) * 180 / math.Pi
			tm.Gain = append(tm.Gain, GainCrossing{FreqHz: fc, PhaseMarginDeg: wrap180(180 + ph)})
		}
		// phase crossings of −180 + k·360 between prevP and p
		lo, hi := math.Min(prevP, p), math.Max(prevP, p)
		for k := math.Ceil((lo + 180) / 360); -180+k*360 <= hi; k++ {
			target := -180 + k*360
			if target == prevP && i > 1 {
				continue // counted at the previous step
			}
			ref := prevP
			fp := bisect(prevF, f, func(x float64) float64 {
				return near(cmplx.Phase(eval(x))*180/math.Pi, ref) - target
			}, prevP-target)
			tm.Phase = append(tm.Phase, PhaseCrossing{FreqHz: fp, GainMarginDB: -20 * math.Log10(cmplx.Abs(eval(fp)))})
		}
		prevF, prevL, prevG, prevP = f, l, g, p
	}
	for i, c := range tm.Gain {
		if tm.PhaseMarginDeg == nil || c.PhaseMarginDeg < *tm.PhaseMarginDeg {
			tm.CrossoverHz, tm.PhaseMarginDeg = &tm.Gain[i].FreqHz, &tm.Gain[i].PhaseMarginDeg
		}
	}
	for i, c := range tm.Phase {
		if tm.GainMarginDB == nil || c.GainMarginDB < *tm.GainMarginDB {
			tm.PhaseCrossoverHz, tm.GainMarginDB = &tm.Phase[i].FreqHz, &tm.Phase[i].GainMarginDB
		}
	}
	tm.StableClosedLoop = true
	for _, p := range closedLoopPoles(r) {
		if real(p) >= 0 {
			tm.StableClosedLoop = false
		}
	}
	return tm
}

// bisect finds x in [a, b] with fn(x) = 0, given fa = fn(a) and a sign
// change over the interval, bisecting in log frequency.
func bisect(a, b float64, fn func(float64) float64, fa float64) float64 {
	for range 100 {
		m := math.Sqrt(a * b)
		fm := fn(m)
		if fm == 0 {
			return m
		}
		if (fm < 0) == (fa < 0) {
			a, fa = m, fm
		} else {
			b = m
		}
		if b/a-1 < 1e-12 {
			break
		}
	}
	return math.Sqrt(a * b)
}

// wrap180 wraps degrees to (−180, 180].
func wrap180(d float64) float64 {
	d = math.Mod(d, 360)
	if d > 180 {
		d -= 360
	} else if d <= -180 {
		d += 360
	}
	return d
}

// padeDelay is the (2,2) Padé approximant of e^(−s·T):
// (1 − sT/2 + (sT)²/12) / (1 + sT/2 + (sT)²/12).
func padeDelay(t float64) (num, den poly) {
	return poly{1, -t / 2, t * t / 12}, poly{1, t / 2, t * t / 12}
}

// closedLoopPoles returns the roots of D·Pd + N·Pn, the characteristic
// polynomial of 1 + L with the delay replaced by its Padé approximant.
func closedLoopPoles(r rational) []complex128 {
	num, den := r.num, r.den
	if r.delayS > 0 {
		pn, pd := padeDelay(r.delayS)
		num, den = num.mul(pn), den.mul(pd)
	}
	return den.add(num).roots(2 * math.Pi * 1e4)
}

// settlingPole returns the decay rate σ (1/s) and the damped angular
// frequency ωd (rad/s, 0 for a real pole) of the closed loop's slowest
// pole that is not cancelled by a nearby zero of L (a pole within 20% of
// a zero of N, a pole-zero doublet, leaves almost no residue and is
// skipped).
func settlingPole(r rational) (sigma, wd float64) {
	poles := closedLoopPoles(r)
	zeros := r.num.roots(2 * math.Pi * 1e4)
	sort.Slice(poles, func(i, j int) bool { return math.Abs(real(poles[i])) < math.Abs(real(poles[j])) })
	for _, p := range poles {
		if cmplx.Abs(p) == 0 {
			continue
		}
		doublet := false
		for _, z := range zeros {
			if cmplx.Abs(p-z) < 0.2*cmplx.Abs(p) {
				doublet = true
			}
		}
		if !doublet {
			return math.Max(math.Abs(real(p)), 1), math.Abs(imag(p))
		}
	}
	return 2 * math.Pi * 100, 0
}

// SettlingPole returns the closed loop's settling pole at the operating
// point named load ("" the first): its decay rate σ (1/s) and damped
// angular frequency ωd (rad/s, 0 for a real pole). It is the slowest
// closed-loop pole that is not part of a pole-zero doublet, the pole the
// simulated bench's transient after a change decays with:
// e(τ) = Re{e0·e^((−σ + jωd)·τ)}.
func (s *Scenario) SettlingPole(load string) (sigma, wd float64, err error) {
	op, err := s.point(load)
	if err != nil {
		return 0, 0, err
	}
	sigma, wd = settlingPole(s.loop(op.LoadOhm))
	return sigma, wd, nil
}
