package analysis

import (
	"errors"
	"fmt"
	"math"
	"math/cmplx"
	"sort"
)

// Margin finding works on u = log10(f). Between two measured points a
// crossing is located on the cubic through the segment's two points and
// one neighbour on each side (Lagrange form, fewer points at the ends of
// the sweep), for both gain in dB and unwrapped phase in degrees: at 10
// points per decade the tests measure errors of about 0.01° and 3e-4 dB
// on textbook loops, where a straight line in log f is off by about 0.1°. The
// crossing is bracketed by the two measured points, so the interpolant is
// only searched inside their segment; the nearest measured point is never
// used as the answer.
//
// Uncertainty: the interpolated value at the crossing is a weighted sum
// Σ ℓⱼ·yⱼ of its neighbours, so its variance is Σ ℓⱼ²·σⱼ² (neighbours'
// errors taken independent). A gain error δg moves a gain crossover by
// δu = −δg/g′ decades, which moves the phase read there by φ′·δu; hence
// σ(PM)² = σφ² + (φ′·σg/g′)² and σ(f)/f = ln10·σg/|g′|, and the same with
// gain and phase exchanged for a phase crossover.

var errTooFewPoints = errors.New("margins need at least 2 points")

// interpolant is the local cubic around one segment.
type interpolant struct {
	u  []float64 // node abscissae, 2 to 4
	lo int       // index of u[0] in the sweep
}

func newInterpolant(us []float64, i int) interpolant {
	lo := max(0, i-1)
	hi := min(len(us)-1, i+2)
	return interpolant{u: us[lo : hi+1], lo: lo}
}

// weights returns the Lagrange basis values ℓⱼ(x) and derivatives ℓⱼ′(x).
func (p interpolant) weights(x float64) (w, dw [4]float64) {
	n := len(p.u)
	for j := 0; j < n; j++ {
		l := 1.0
		for m := 0; m < n; m++ {
			if m != j {
				l *= (x - p.u[m]) / (p.u[j] - p.u[m])
			}
		}
		w[j] = l
		d := 0.0
		for m := 0; m < n; m++ {
			if m == j {
				continue
			}
			t := 1 / (p.u[j] - p.u[m])
			for q := 0; q < n; q++ {
				if q != j && q != m {
					t *= (x - p.u[q]) / (p.u[j] - p.u[q])
				}
			}
			d += t
		}
		dw[j] = d
	}
	return w, dw
}

// eval returns the value, slope and standard uncertainty at x of the
// interpolant of ys with uncertainties sig.
func (p interpolant) eval(x float64, ys, sig []float64) (v, dv, s float64) {
	w, dw := p.weights(x)
	for j := range p.u {
		y := ys[p.lo+j]
		v += w[j] * y
		dv += dw[j] * y
		s += w[j] * w[j] * sig[p.lo+j] * sig[p.lo+j]
	}
	return v, dv, math.Sqrt(s)
}

// crossing returns the u in [us[i], us[i+1]] where the interpolant of ys
// equals level, by bisection; ys[i] and ys[i+1] lie on opposite sides,
// "above" meaning > level, or ≥ level when atLevelIsAbove is set (the
// same side rule that detected the crossing).
func crossing(p interpolant, us, ys []float64, i int, level float64, atLevelIsAbove bool) float64 {
	side := func(v float64) bool { return v > level || atLevelIsAbove && v == level }
	lo, hi := us[i], us[i+1]
	above := side(ys[i])
	zero := make([]float64, len(ys))
	for it := 0; it < 100 && hi-lo > 1e-15; it++ {
		mid := 0.5 * (lo + hi)
		v, _, _ := p.eval(mid, ys, zero)
		if side(v) == above {
			lo = mid
		} else {
			hi = mid
		}
	}
	return 0.5 * (lo + hi)
}

// ComputeMargins finds every gain crossover (0 dB) and phase crossover
// (phase = −180° + k·360°) of a measured loop gain L, sorted by strictly
// increasing frequency. PhaseDeg may be wrapped or carry any multiple of
// 360°: it is unwrapped first (consecutive points must differ by less than
// 180°). Each crossing is interpolated in log frequency between the two
// points that bracket it (see the package notes above).
//
//	PM = 180° + angle(L) at |L| = 1, wrapped to (−180°, 180°]
//	GM = −20·log10|L| at a phase crossover, dB
//	delay margin = PM in radians / (2π·f) at the gain crossover, 0 if PM ≤ 0
//	modulus margin = min |1 + L| over the band (= 1/Ms), with its
//	standard uncertainty ModulusSigma (see modulusMargin)
//
// When no crossing of a kind lies in the band, GainReach or PhaseReach
// says where it is expected: for gain, above the band when |L| > 1
// throughout and falling at the top (below the band when rising at the
// bottom), and the reverse when |L| < 1 throughout; for phase, above the
// band when the phase falls at the top, below when it rises at the
// bottom. A trend counts when it exceeds the two points' combined
// uncertainty; otherwise the reach is NotFound.
//
// Errors: fewer than 2 points, a non-positive, NaN or infinite frequency,
// frequencies not strictly increasing, a NaN or infinite gain or phase, a
// negative, NaN or infinite uncertainty.
func ComputeMargins(pts []Point) (Margins, error) {
	m := Margins{WorstPM: -1, WorstGM: -1}
	n := len(pts)
	if n < 2 {
		return m, fmt.Errorf("margins of %d points: %w", n, errTooFewPoints)
	}
	us := make([]float64, n)
	gs := make([]float64, n)
	ps := make([]float64, n)
	sg := make([]float64, n)
	sp := make([]float64, n)
	for i, p := range pts {
		if !finite(p.FreqHz) || p.FreqHz <= 0 {
			return m, fmt.Errorf("margins: point %d: frequency %g Hz must be positive and finite", i, p.FreqHz)
		}
		if i > 0 && !(p.FreqHz > pts[i-1].FreqHz) {
			return m, fmt.Errorf("margins: point %d: frequency %g Hz not above point %d's %g Hz (sort the sweep, drop duplicates)", i, p.FreqHz, i-1, pts[i-1].FreqHz)
		}
		if !finite(p.GainDB) || !finite(p.PhaseDeg) {
			return m, fmt.Errorf("margins: point %d at %g Hz: gain %g dB, phase %g°: %w", i, p.FreqHz, p.GainDB, p.PhaseDeg, ErrNonFinite)
		}
		if !finite(p.GainSigmaDB) || !finite(p.PhaseSigmaDeg) || p.GainSigmaDB < 0 || p.PhaseSigmaDeg < 0 {
			return m, fmt.Errorf("margins: point %d at %g Hz: uncertainties %g dB, %g° must be finite and not negative", i, p.FreqHz, p.GainSigmaDB, p.PhaseSigmaDeg)
		}
		us[i] = math.Log10(p.FreqHz)
		gs[i] = p.GainDB
		ps[i] = p.PhaseDeg
		sg[i] = p.GainSigmaDB
		sp[i] = p.PhaseSigmaDeg
	}
	ps = UnwrapDeg(ps)

	for i := 0; i+1 < n; i++ {
		ip := newInterpolant(us, i)
		// Gain crossovers: |L| passes 0 dB.
		if (gs[i] > 0) != (gs[i+1] > 0) {
			u := crossing(ip, us, gs, i, 0, false)
			_, dg, sgu := ip.eval(u, gs, sg)
			ph, dph, spu := ip.eval(u, ps, sp)
			if math.Abs(dg) < 1e-12 {
				dg = (gs[i+1] - gs[i]) / (us[i+1] - us[i])
			}
			f := math.Pow(10, u)
			su := sgu / math.Abs(dg)
			c := GainCrossover{
				FreqHz:         f,
				PhaseMarginDeg: WrapDeg(180 + ph),
				SigmaDeg:       math.Hypot(spu, dph*su),
				SigmaFreqHz:    f * math.Ln10 * su,
			}
			if c.PhaseMarginDeg > 0 {
				c.DelayMarginS = c.PhaseMarginDeg * math.Pi / 180 / (2 * math.Pi * f)
			}
			m.GainCrossovers = append(m.GainCrossovers, c)
		}
		// Phase crossovers: phase passes −180° + k·360°, possibly several
		// levels in one segment.
		k0 := math.Floor((ps[i] + 180) / 360)
		k1 := math.Floor((ps[i+1] + 180) / 360)
		lvls := levelsBetween(k0, k1)
		for _, k := range lvls {
			level := -180 + 360*k
			u := crossing(ip, us, ps, i, level, true)
			g, dg, sgu := ip.eval(u, gs, sg)
			_, dph, spu := ip.eval(u, ps, sp)
			if math.Abs(dph) < 1e-12 {
				dph = (ps[i+1] - ps[i]) / (us[i+1] - us[i])
			}
			f := math.Pow(10, u)
			su := spu / math.Abs(dph)
			m.PhaseCrossovers = append(m.PhaseCrossovers, PhaseCrossover{
				FreqHz:       f,
				GainMarginDB: -g,
				SigmaDB:      math.Hypot(sgu, dg*su),
				SigmaFreqHz:  f * math.Ln10 * su,
			})
		}
	}
	for i, c := range m.GainCrossovers {
		if m.WorstPM < 0 || c.PhaseMarginDeg < m.GainCrossovers[m.WorstPM].PhaseMarginDeg {
			m.WorstPM = i
		}
	}
	for i, c := range m.PhaseCrossovers {
		if m.WorstGM < 0 || c.GainMarginDB < m.PhaseCrossovers[m.WorstGM].GainMarginDB {
			m.WorstGM = i
		}
	}
	if len(m.GainCrossovers) == 0 {
		m.GainReach = gainReach(gs, sg)
	}
	if len(m.PhaseCrossovers) == 0 {
		m.PhaseReach = phaseReach(ps, sp)
	}
	m.ModulusMargin, m.ModulusFreqHz, m.ModulusSigma = modulusMargin(us, gs, ps, sg, sp)
	return m, nil
}

// levelsBetween returns the crossing levels k (of −180+360k) passed going
// from level band k0 to band k1, in the order they are passed.
func levelsBetween(k0, k1 float64) []float64 {
	var out []float64
	for k := k0; k < k1; k++ { // rising: passes k0+1 … k1
		out = append(out, k+1)
	}
	for k := k0; k > k1; k-- { // falling: passes k0 … k1+1
		out = append(out, k)
	}
	return out
}

// trend reports whether ys rises (+1) or falls (−1) from index a to b by
// more than the two points' combined uncertainty, or 0.
func trend(ys, sig []float64, a, b int) int {
	d := ys[b] - ys[a]
	thr := math.Max(math.Hypot(sig[a], sig[b]), 1e-9)
	switch {
	case d > thr:
		return 1
	case d < -thr:
		return -1
	}
	return 0
}

func gainReach(gs, sg []float64) Reach {
	n := len(gs)
	top, bottom := trend(gs, sg, n-2, n-1), trend(gs, sg, 0, 1)
	if gs[0] > 0 { // |L| > 1 everywhere
		switch {
		case top < 0:
			return AboveBand
		case bottom > 0:
			return BelowBand
		}
		return NotFound
	}
	switch { // |L| ≤ 1 everywhere
	case bottom < 0:
		return BelowBand
	case top > 0:
		return AboveBand
	}
	return NotFound
}

func phaseReach(ps, sp []float64) Reach {
	n := len(ps)
	switch {
	case trend(ps, sp, n-2, n-1) < 0:
		return AboveBand
	case trend(ps, sp, 0, 1) > 0:
		return BelowBand
	}
	return NotFound
}

// modulusMargin returns min |1 + L| over the band, its frequency and its
// standard uncertainty: the interpolated gain and phase are scanned at 32
// steps per segment and the best step refined by golden-section search
// over the steps either side (which may lie in the neighbouring segment).
//
// Uncertainty, to first order: a change of the curve moves the minimum's
// location only at second order (the slope of |1+L| in u is zero at an
// inner minimum, and a minimum at a band edge stays at the edge), so the
// minimum changes by the change of D = |1+L| at the fixed minimiser u*.
// With L = R·e^(jφ), R = 10^(g/20), D² = 1 + 2R·cos φ + R²:
//
//	∂D/∂g = (R + cos φ)·R / D · ln10/20   (per dB)
//	∂D/∂φ = −R·sin φ / D · π/180          (per degree)
//
// and g(u*), φ(u*) are the interpolants Σ ℓⱼ·yⱼ with variances Σ ℓⱼ²·σⱼ²
// (neighbours' errors, and gain and phase errors, taken independent, as
// for PM and GM), hence σ(D)² = (∂D/∂g)²·σg(u*)² + (∂D/∂φ)²·σφ(u*)².
func modulusMargin(us, gs, ps, sg, sp []float64) (mm, freq, sigma float64) {
	zero := make([]float64, len(us))
	n := len(us)
	dist := func(u float64) float64 {
		i := sort.SearchFloat64s(us, u) - 1 // us[i] < u ≤ us[i+1]
		i = max(0, min(i, n-2))
		ip := newInterpolant(us, i)
		g, _, _ := ip.eval(u, gs, zero)
		p, _, _ := ip.eval(u, ps, zero)
		l := cmplx.Rect(RatioFromDB(g), p*math.Pi/180)
		return cmplx.Abs(1 + l)
	}
	const steps = 32
	best, bu, bh := math.Inf(1), us[0], 0.0
	for i := 0; i+1 < n; i++ {
		h := (us[i+1] - us[i]) / steps
		for s := 0; s <= steps; s++ {
			u := us[i] + h*float64(s)
			if d := dist(u); d < best {
				best, bu, bh = d, u, h
			}
		}
	}
	a, b := math.Max(us[0], bu-bh), math.Min(us[n-1], bu+bh)
	const gr = 0.6180339887498949
	c, d := b-gr*(b-a), a+gr*(b-a)
	fc, fd := dist(c), dist(d)
	for it := 0; it < 100 && b-a > 1e-14; it++ {
		if fc < fd {
			b, d, fd = d, c, fc
			c = b - gr*(b-a)
			fc = dist(c)
		} else {
			a, c, fc = c, d, fd
			d = a + gr*(b-a)
			fd = dist(d)
		}
	}
	if x := 0.5 * (a + b); dist(x) < best {
		best, bu = dist(x), x
	}
	i := max(0, min(sort.SearchFloat64s(us, bu)-1, n-2))
	ip := newInterpolant(us, i)
	g, _, sgu := ip.eval(bu, gs, sg)
	p, _, spu := ip.eval(bu, ps, sp)
	r := RatioFromDB(g)
	sn, cs := math.Sincos(p * math.Pi / 180)
	if best > 0 {
		dg := (r + cs) * r / best * math.Ln10 / 20
		dp := -r * sn / best * math.Pi / 180
		sigma = math.Hypot(dg*sgu, dp*spu)
	} else {
		// L = −1 exactly: D = |δL| to first order, not Gaussian; report
		// its rms, R·sqrt((ln10/20·σg)² + (π/180·σφ)²).
		sigma = r * math.Hypot(math.Ln10/20*sgu, math.Pi/180*spu)
	}
	return best, math.Pow(10, bu), sigma
}
