package tui

import (
	"fmt"
	"math"
	"strings"
	"time"

	"loopsweep/analysis"
	"loopsweep/sweep"
)

// quality is how a point was obtained; the plot draws each with its own
// glyph so it reads without colour.
type quality uint8

const (
	qGood    quality = iota // first attempt was good
	qRetried                // needed more than one attempt
	qFlagged                // stayed bad after the allowed attempts
)

// pointView is one point as the screen shows it.
type pointView struct {
	FreqHz        float64
	Has           bool // a chosen attempt exists
	GainDB        float64
	PhaseDeg      float64 // unwrapped along the sweep for display
	GainSigmaDB   float64
	PhaseSigmaDeg float64
	SNRdB         float64 // the worse of the two channels
	Quality       quality
	Attempts      int
}

// viewPoints converts session points for display. Phases are unwrapped
// along the sweep, each step taken as the shortest turn, so a loop whose
// phase falls through −180° draws as one continuous curve.
func viewPoints(s *sweep.Session) []pointView {
	pts := s.Points
	out := make([]pointView, len(pts))
	prev, havePrev := 0.0, false
	for i, p := range pts {
		v := pointView{FreqHz: p.FreqHz, Attempts: len(p.Attempts)}
		switch {
		case p.Flagged:
			v.Quality = qFlagged
		case len(p.Attempts) > 1:
			v.Quality = qRetried
		}
		if a, ok := s.Chosen(i); ok && finite(a.GainDB) && finite(a.PhaseDeg) {
			v.Has = true
			v.GainDB = a.GainDB
			v.GainSigmaDB = a.GainSigmaDB
			v.PhaseSigmaDeg = a.PhaseSigmaDeg
			v.SNRdB = math.Min(a.Ch1.SNRdB, a.Ch2.SNRdB)
			ph := a.PhaseDeg
			if havePrev {
				ph = prev + analysis.WrapDeg(ph-prev)
			}
			v.PhaseDeg = ph
			prev, havePrev = ph, true
		}
		out[i] = v
	}
	return out
}

func finite(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) }

// formatHz prints a frequency with an SI prefix and three significant
// digits: 950, 1.23k, 12.3k, 100k, 1.00M.
func formatHz(f float64) string {
	if !finite(f) {
		return "—"
	}
	if f == 0 {
		return "0"
	}
	prefixes := []struct {
		scale float64
		p     string
	}{{1e9, "G"}, {1e6, "M"}, {1e3, "k"}, {1, ""}, {1e-3, "m"}}
	for _, p := range prefixes {
		if math.Abs(f) >= p.scale*0.9995 || p.p == "m" {
			v := f / p.scale
			switch a := math.Abs(v); {
			case a >= 99.95:
				return fmt.Sprintf("%.0f%s", v, p.p)
			case a >= 9.995:
				return fmt.Sprintf("%.1f%s", v, p.p)
			default:
				return fmt.Sprintf("%.2f%s", v, p.p)
			}
		}
	}
	return fmt.Sprintf("%g", f)
}

// decadeLabel names a power of ten for the frequency axis: 10, 100, 1k,
// 10k, 100k, 1M.
func decadeLabel(exp int) string {
	prefix := []string{"", "k", "M", "G"}
	if exp < 0 {
		return fmt.Sprintf("1e%d", exp)
	}
	i := exp / 3
	if i >= len(prefix) {
		return fmt.Sprintf("1e%d", exp)
	}
	return "1" + strings.Repeat("0", exp%3) + prefix[i]
}

// formatDuration prints m:ss or h:mm:ss.
func formatDuration(d time.Duration) string {
	if d < 0 {
		d = 0
	}
	s := int(d.Round(time.Second) / time.Second)
	if s >= 3600 {
		return fmt.Sprintf("%d:%02d:%02d", s/3600, s/60%60, s%60)
	}
	return fmt.Sprintf("%d:%02d", s/60, s%60)
}
