package tui

import (
	"errors"
	"strings"
	"testing"

	"github.com/charmbracelet/x/ansi"

	"loopsweep/analysis"
)

func marginsText(mg analysis.Margins, err error) string {
	st := newStyles(plainRenderer())
	p := newMargins(&st, DefaultPMTargetDeg, DefaultGMTargetDB)
	p.SetSize(60, 10)
	p.SetMargins(mg, err, false)
	return ansi.Strip(p.View())
}

func TestMarginsVerdict(t *testing.T) {
	gc := func(pm float64) []analysis.GainCrossover {
		return []analysis.GainCrossover{{FreqHz: 1e3, PhaseMarginDeg: pm, SigmaDeg: 0.4, SigmaFreqHz: 5}}
	}
	pc := func(gm float64) []analysis.PhaseCrossover {
		return []analysis.PhaseCrossover{{FreqHz: 5e3, GainMarginDB: gm, SigmaDB: 0.2, SigmaFreqHz: 20}}
	}
	// Margin values from the worked arithmetic in REFERENCES.md (common
	// practice): −135° at 0 dB is PM 45°, −9 dB at −180° is GM 9 dB,
	// +13 dB at −180° is GM −13 dB, −215° at 0 dB is PM −35°. Targets
	// PM ≥ 45°, GM ≥ 6 dB (common practice); "≥" makes 45° pass.
	tests := []struct {
		name string
		mg   analysis.Margins
		err  error
		want []string
	}{
		{"both met, PM on the target", analysis.Margins{GainCrossovers: gc(45), PhaseCrossovers: pc(9), ModulusMargin: 0.5, ModulusFreqHz: 2e3},
			nil, []string{"PM    45.0° ± 0.4°  ok", "GM    9.0 dB ± 0.2 dB  ok", "MM    0.50 (Ms 2.00) at 2.00k Hz", "verdict: meets targets"}},
		{"negative GM", analysis.Margins{GainCrossovers: gc(50), PhaseCrossovers: pc(-13)},
			nil, []string{"GM    -13.0 dB ± 0.2 dB  LOW", "verdict: FAILS GM -13.0 dB < 6 dB"}},
		{"unstable PM", analysis.Margins{GainCrossovers: gc(-35), PhaseCrossovers: pc(9)},
			nil, []string{"PM    -35.0° ± 0.4°  LOW", "verdict: FAILS PM -35.0° < 45°"}},
		{"no phase crossover in band", analysis.Margins{GainCrossovers: gc(60), PhaseReach: analysis.AboveBand},
			nil, []string{"f180  not reached yet (above band)", "verdict: meets targets (no phase crossover in band)"}},
		{"crossover below the band", analysis.Margins{GainReach: analysis.BelowBand, PhaseReach: analysis.NotFound},
			nil, []string{"fc    not reached yet (below band)", "verdict: crossover not reached yet"}},
		{"too few points", analysis.Margins{}, errors.New("margins need at least 2 points"),
			[]string{"fc    not reached yet", "verdict: crossover not reached yet", "margins need at least 2 points"}},
		{"worst of several", analysis.Margins{GainCrossovers: append(gc(70), analysis.GainCrossover{FreqHz: 3e3, PhaseMarginDeg: 30, SigmaDeg: 1}), WorstPM: 1, PhaseCrossovers: pc(10)},
			nil, []string{"fc    3.00k Hz ± 0 Hz  (worst of 2)", "PM    30.0° ± 1.0°  LOW"}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got := marginsText(tt.mg, tt.err)
			for _, w := range tt.want {
				if !strings.Contains(got, w) {
					t.Errorf("lacks %q:\n%s", w, got)
				}
			}
		})
	}
}

func TestFormatHelpers(t *testing.T) {
	// Expected strings written out by hand from the formats' rules.
	for _, c := range []struct {
		f    float64
		want string
	}{{950, "950"}, {1234, "1.23k"}, {12345, "12.3k"}, {100e3, "100k"}, {1e6, "1.00M"}, {0.02, "20.0m"}, {0, "0"}, {999.96, "1.00k"}} {
		if got := formatHz(c.f); got != c.want {
			t.Errorf("formatHz(%g) = %q, want %q", c.f, got, c.want)
		}
	}
	for exp, want := range map[int]string{1: "10", 2: "100", 3: "1k", 4: "10k", 5: "100k", 6: "1M"} {
		if got := decadeLabel(exp); got != want {
			t.Errorf("decadeLabel(%d) = %q, want %q", exp, got, want)
		}
	}
}

func TestViewPointsUnwrapsPhase(t *testing.T) {
	s := testSession(31, 31)
	// Wrapped phases from the session: past 5.48 kHz the test loop's
	// phase is below −180°, stored wrapped as positive values.
	v := viewPoints(&s)
	for i := 1; i < len(v); i++ {
		if d := v[i].PhaseDeg - v[i-1].PhaseDeg; d > 0 || d < -60 {
			t.Fatalf("phase steps by %g° from point %d to %d: not unwrapped", d, i-1, i)
		}
	}
	// The last point, 100 kHz: −90° − atan(100/3) − atan(100/10) in
	// degrees = −90 − 88.28 − 84.29 = −262.57° (closed form of the test
	// loop).
	if got := v[len(v)-1].PhaseDeg; got > -262.5 || got < -262.7 {
		t.Errorf("phase at 100 kHz %g°, want −262.6°", got)
	}
}
