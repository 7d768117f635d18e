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
