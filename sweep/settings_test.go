package sweep

import (
	"errors"
	"math"
	"testing"
	"time"
)

func TestParseSI(t *testing.T) {
	// Expected values are the SI prefix definitions (BIPM SI Brochure,
	// table of prefixes): k = 1e3, M = 1e6, m = 1e-3, u/µ = 1e-6.
	cases := []struct {
		in, unit string
		want     float64
	}{
		{"100", "Hz", 100},
		{"1k", "Hz", 1e3},
		{"2.2M", "Hz", 2.2e6},
		{"10kHz", "Hz", 1e4},
		{"10 kHz", "Hz", 1e4},
		{"10khz", "Hz", 1e4},
		{"20mV", "V", 0.02},
		{"20 mV", "V", 0.02},
		{"1.5", "V", 1.5},
		{"500u", "V", 500e-6},
		{"500µV", "V", 500e-6},
		{"1e3", "Hz", 1000},
		{"  3K ", "Hz", 3000},
		{"1mHz", "Hz", 1e-3},
		{"-2", "V", -2},
	}
	for _, c := range cases {
		got, err := ParseSI(c.in, c.unit)
		if err != nil {
			t.Errorf("ParseSI(%q, %q): %v", c.in, c.unit, err)
			continue
		}
		if math.Abs(got-c.want) > 1e-12*math.Abs(c.want) {
			t.Errorf("ParseSI(%q, %q) = %g, want %g", c.in, c.unit, got, c.want)
		}
	}
	for _, in := range []string{"", "k", "Hz", "kHz", "abc", "1..2", "NaN", "Inf", "1e999", "0x10", "1kk", "1 k k"} {
		if v, err := ParseSI(in, "Hz"); !errors.Is(err, ErrSI) {
			t.Errorf("ParseSI(%q) = %g, %v; want ErrSI", in, v, err)
		}
	}
}

func FuzzParseSI(f *testing.F) {
	for _, s := range []string{"100", "1k", "2.2M", "10kHz", "20mV", "", "µ", "1e-3m"} {
		f.Add(s, "Hz")
	}
	f.Fuzz(func(t *testing.T, s, unit string) {
		v, err := ParseSI(s, unit)
		if err == nil && !finite(v) {
			t.Fatalf("ParseSI(%q, %q) = %g with no error", s, unit, v)
		}
	})
}

func TestValidateNamesTheSetting(t *testing.T) {
	cases := []struct {
		name    string
		edit    func(*Settings)
		setting string
	}{
		{"stop not above start", func(s *Settings) { s.StopHz = s.StartHz }, "stop_hz"},
		{"negative start", func(s *Settings) { s.StartHz = -1 }, "start_hz"},
		{"zero points per decade", func(s *Settings) { s.PerDecade = 0 }, "per_decade"},
		{"amplitude above cap", func(s *Settings) { s.AmpVpp = 2 * s.MaxAmpVpp }, "amp_vpp"},
		{"negative cycles", func(s *Settings) { s.Cycles = -3 }, "cycles"},
		{"zero cap", func(s *Settings) { s.MaxAmpVpp = 0 }, "max_amp_vpp"},
		{"negative settle", func(s *Settings) { s.SettleCycles = -1 }, "settle_cycles"},
		{"negative settle time", func(s *Settings) { s.SettleMin = -time.Second }, "settle_min_ns"},
		{"profile above cap", func(s *Settings) { s.AmpProfile = []AmpBreak{{100, 0.01}, {1000, 1}} }, "amp_profile"},
		{"profile not ascending", func(s *Settings) { s.AmpProfile = []AmpBreak{{100, 0.01}, {50, 0.01}} }, "amp_profile"},
		{"unknown measure", func(s *Settings) { s.Measure = "phase" }, "measure"},
		{"NaN start", func(s *Settings) { s.StartHz = math.NaN() }, "start_hz"},
		{"bad list entry", func(s *Settings) { s.Frequencies = []float64{100, 0} }, "frequencies_hz"},
		{"too few samples per cycle", func(s *Settings) { s.MinPerCycle = 2 }, "min_samples_per_cycle"},
		{"too many points", func(s *Settings) { s.PerDecade = 100000 }, "per_decade"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			s := Defaults()
			c.edit(&s)
			err := s.Validate()
			var se *SettingError
			if !errors.As(err, &se) {
				t.Fatalf("Validate() = %v, want a *SettingError", err)
			}
			if se.Setting != c.setting {
				t.Errorf("error names %q, want %q (%v)", se.Setting, c.setting, err)
			}
		})
	}
	if err := Defaults().Validate(); err != nil {
		t.Errorf("Defaults().Validate() = %v", err)
	}
}

func TestPlan(t *testing.T) {
	// Log plan: 100 Hz to 10 kHz at 10 per decade is 21 points,
	// f_k = 100·10^(k/10) (closed form).
	s := Defaults()
	s.StartHz, s.StopHz, s.PerDecade = 100, 10e3, 10
	fs := s.Plan()
	if len(fs) != 21 {
		t.Fatalf("log plan has %d points, want 21", len(fs))
	}
	for k, f := range fs {
		want := 100 * math.Pow(10, float64(k)/10)
		if math.Abs(f-want) > 1e-9*want {
			t.Errorf("point %d = %g Hz, want %g Hz", k, f, want)
		}
	}
	// Linear plan: 1 kHz to 2 kHz in 300 Hz steps is 1000, 1300, 1600,
	// 1900 and the stop, 2000 (arithmetic).
	s.StartHz, s.StopHz, s.LinearStep = 1000, 2000, 300
	want := []float64{1000, 1300, 1600, 1900, 2000}
	if got := s.Plan(); !equalF(got, want) {
		t.Errorf("linear plan = %v, want %v", got, want)
	}
	s.LinearStep = 0
	s.Frequencies = []float64{300, 100, 200, 100}
	if got := s.Plan(); !equalF(got, []float64{100, 200, 300}) {
		t.Errorf("list plan = %v, want sorted unique", got)
	}
}

func equalF(a, b []float64) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if math.Abs(a[i]-b[i]) > 1e-9*math.Abs(b[i]) {
			return false
		}
	}
	return true
}

func TestAmplitudeAt(t *testing.T) {
	s := Defaults()
	s.MaxAmpVpp = 0.1
	s.AmpProfile = []AmpBreak{{100, 0.08}, {10e3, 0.02}}
	// Linear in amplitude against log f: 1 kHz is halfway in log between
	// 100 Hz and 10 kHz, so (0.08+0.02)/2 = 0.05 (arithmetic).
	cases := []struct{ f, want float64 }{{10, 0.08}, {100, 0.08}, {1000, 0.05}, {10e3, 0.02}, {1e6, 0.02}}
	for _, c := range cases {
		if got := s.AmplitudeAt(c.f); math.Abs(got-c.want) > 1e-12 {
			t.Errorf("AmplitudeAt(%g) = %g, want %g", c.f, got, c.want)
		}
	}
	s.AmpProfile = nil
	s.AmpVpp = 0.5 // above the cap (Validate would refuse): still clamped
	if got := s.AmplitudeAt(1000); got != 0.1 {
		t.Errorf("AmplitudeAt above cap = %g, want the cap 0.1", got)
	}
}

func TestSettleTime(t *testing.T) {
	s := Defaults()
	s.SettleCycles, s.SettleMin = 10, 5*time.Millisecond
	// 10 cycles at 100 Hz is 100 ms; at 10 kHz it is 1 ms, below the 5 ms floor.
	if got := s.SettleTime(100); got != 100*time.Millisecond {
		t.Errorf("SettleTime(100) = %v, want 100ms", got)
	}
	if got := s.SettleTime(10e3); got != 5*time.Millisecond {
		t.Errorf("SettleTime(10k) = %v, want 5ms", got)
	}
}
