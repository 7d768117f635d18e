package sweep

import (
	"errors"
	"math"
	"sort"

	"loopsweep/analysis"
)

// ErrNotLoop is returned by Margins for a session that measured a plain
// transfer function (measure ratio): it has no stability margins.
var ErrNotLoop = errors.New("margins need a loop-gain session (measure loop)")

// Chosen returns the attempt that counts for point i: the one the user
// chose (Point.Chosen ≥ 0), else the best by uncertainty — among the
// attempts with no problem if there are any, the one with the smallest
// combined relative uncertainty (σ_gain·ln10/20)² + (σ_phase in rad)².
// It reports false when i is out of range or the point has no attempt.
func (s *Session) Chosen(i int) (Attempt, bool) {
	if i < 0 || i >= len(s.Points) {
		return Attempt{}, false
	}
	p := s.Points[i]
	if len(p.Attempts) == 0 {
		return Attempt{}, false
	}
	if p.Chosen >= 0 && p.Chosen < len(p.Attempts) {
		return p.Attempts[p.Chosen], true
	}
	best, bestScore, bestOK := -1, math.Inf(1), false
	for k, a := range p.Attempts {
		ok := a.Problem == ""
		sc := attemptScore(a)
		if best < 0 || (ok && !bestOK) || (ok == bestOK && sc < bestScore) {
			best, bestScore, bestOK = k, sc, ok
		}
	}
	return p.Attempts[best], true
}

func attemptScore(a Attempt) float64 {
	g := a.GainSigmaDB * math.Ln10 / 20
	p := a.PhaseSigmaDeg * math.Pi / 180
	sc := g*g + p*p
	if math.IsNaN(sc) {
		return math.Inf(1)
	}
	return sc
}

// Curve returns the chosen attempt of every measured point as analysis
// points sorted by frequency, phase unwrapped (analysis.UnwrapDeg) from
// the lowest frequency.
func (s *Session) Curve() []analysis.Point {
	var pts []analysis.Point
	for i := range s.Points {
		a, ok := s.Chosen(i)
		if !ok || !finite(a.GainDB) || !finite(a.PhaseDeg) {
			continue
		}
		pts = append(pts, analysis.Point{
			FreqHz:        a.Tone(s.Points[i].FreqHz),
			GainDB:        a.GainDB,
			PhaseDeg:      a.PhaseDeg,
			GainSigmaDB:   a.GainSigmaDB,
			PhaseSigmaDeg: a.PhaseSigmaDeg,
		})
	}
	sort.SliceStable(pts, func(i, j int) bool { return pts[i].FreqHz < pts[j].FreqHz })
	// Two points may have injected the same tone (tones move to fit
	// whole cycles): keep the one with the smaller uncertainty.
	out := pts[:0]
	for _, p := range pts {
		if n := len(out); n > 0 && p.FreqHz <= out[n-1].FreqHz*(1+1e-12) {
			if pointScore(p) < pointScore(out[n-1]) {
				out[n-1] = p
			}
			continue
		}
		out = append(out, p)
	}
	pts = out
	ph := make([]float64, len(pts))
	for i, p := range pts {
		ph[i] = p.PhaseDeg
	}
	if un := analysis.UnwrapDeg(ph); len(un) == len(pts) {
		for i := range pts {
			pts[i].PhaseDeg = un[i]
		}
	}
	return pts
}

// Margins computes the stability margins from the chosen attempts
// (Curve) with analysis.ComputeMargins. Live (the engine) and offline
// (analyze) margins both come from here, so they agree.
func (s *Session) Margins() (analysis.Margins, error) {
	if s.Settings.Measure == MeasureRatio {
		return analysis.Margins{WorstPM: -1, WorstGM: -1}, ErrNotLoop
	}
	return analysis.ComputeMargins(s.Curve())
}

// Tone returns the frequency the attempt injected: FreqHz, or pointHz
// for attempts recorded without it.
func (a Attempt) Tone(pointHz float64) float64 {
	if a.FreqHz > 0 {
		return a.FreqHz
	}
	return pointHz
}

func pointScore(p analysis.Point) float64 {
	return attemptScore(Attempt{GainSigmaDB: p.GainSigmaDB, PhaseSigmaDeg: p.PhaseSigmaDeg})
}

// slopeSpanDec is the half-width, in decades, of the band around a
// crossing over which crossingFreqSigmaRel fits the local slope: one plan
// step at the default 10 points per decade, so the slope comes from the
// response's shape rather than from the noise of points refinement put
// close together (common practice: a derivative is taken over a baseline
// wide against the scatter it divides).
const slopeSpanDec = 0.1

// crossingFreqSigmaRel returns the relative standard uncertainty σ(f)/f
// of a crossing at f found on the curve pts (Session.Curve: sorted,
// phase unwrapped), of the phase (phase true, degrees) or of the gain
// (dB), and the indices lo, lo+1 in pts of the two points that bracket
// it (lo < 0 when f is outside the curve).
//
//	σ(f)/f = σ_y / |dy/d ln f|
//
// where σ_y is the larger of the bracketing points' σ (a bound on the
// interpolated value's, which lies between them) and the slope is the
// weighted least-squares slope of y against ln f over the points within
// slopeSpanDec of f (weights 1/σ²), less one standard uncertainty of that
// slope, so a slope the scatter could fake gives a large σ (+Inf when the
// slope is not resolved at all). A first-order propagation from the
// local interpolant, as analysis.ComputeMargins does, divides by the
// interpolant's own slope: between two points closer together than
// their scatter that slope is noise and the uncertainty comes out too
// small, which this estimate is not fooled by.
func crossingFreqSigmaRel(pts []analysis.Point, f float64, phase bool) (rel float64, lo int) {
	lo = -1
	for i := 0; i+1 < len(pts); i++ {
		if pts[i].FreqHz <= f && f <= pts[i+1].FreqHz {
			lo = i
			break
		}
	}
	if lo < 0 || !(f > 0) {
		return math.Inf(1), -1
	}
	val := func(p analysis.Point) (y, s float64) {
		if phase {
			return p.PhaseDeg, p.PhaseSigmaDeg
		}
		return p.GainDB, p.GainSigmaDB
	}
	_, s0 := val(pts[lo])
	_, s1 := val(pts[lo+1])
	sy := math.Max(s0, s1)
	// Weighted least squares y = a + b·x, x = ln(f_j/f): b = Sxy/Sxx
	// about the weighted means, var(b) = 1/Sxx.
	span := slopeSpanDec * math.Ln10
	var sw, swx, swy float64
	type xy struct{ x, y, w float64 }
	var use []xy
	for j, p := range pts {
		x := math.Log(p.FreqHz / f)
		if math.Abs(x) > span && j != lo && j != lo+1 {
			continue
		}
		y, s := val(p)
		w := 1 / math.Max(s*s, 1e-18)
		use = append(use, xy{x, y, w})
		sw += w
		swx += w * x
		swy += w * y
	}
	mx, my := swx/sw, swy/sw
	var sxx, sxy float64
	for _, u := range use {
		sxx += u.w * (u.x - mx) * (u.x - mx)
		sxy += u.w * (u.x - mx) * (u.y - my)
	}
	if !(sxx > 0) {
		return math.Inf(1), lo
	}
	slope := math.Abs(sxy/sxx) - 1/math.Sqrt(sxx)
	if !(slope > 0) {
		return math.Inf(1), lo
	}
	return sy / slope, lo
}
