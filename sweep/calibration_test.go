package sweep

import (
	"math"
	"math/cmplx"
	"strings"
	"testing"
)

func TestCalibrationAt(t *testing.T) {
	c := &Calibration{Points: []CalPoint{{100, 0, 0}, {10e3, 2, -10}}}
	// Halfway in log frequency (1 kHz): 1 dB and −5° (linear
	// interpolation, arithmetic); beyond the ends held flat.
	cases := []struct{ f, db, deg float64 }{{10, 0, 0}, {1000, 1, -5}, {1e5, 2, -10}}
	for _, tc := range cases {
		k := c.At(tc.f)
		if db := 20 * math.Log10(cmplx.Abs(k)); math.Abs(db-tc.db) > 1e-12 {
			t.Errorf("At(%g) gain %g dB, want %g", tc.f, db, tc.db)
		}
		if deg := cmplx.Phase(k) * 180 / math.Pi; math.Abs(deg-tc.deg) > 1e-9 {
			t.Errorf("At(%g) phase %g°, want %g", tc.f, deg, tc.deg)
		}
	}
	// Phase interpolated across the ±180° wrap: 175° and −175° are 10°
	// apart, so halfway is 180°.
	w := &Calibration{Points: []CalPoint{{100, 0, 175}, {10e3, 0, -175}}}
	if deg := cmplx.Phase(w.At(1000)) * 180 / math.Pi; math.Abs(math.Abs(deg)-180) > 1e-9 {
		t.Errorf("wrapped interpolation gives %g°, want ±180°", deg)
	}
}

func TestParseCalibrationErrors(t *testing.T) {
	cases := []struct{ name, in, want string }{
		{"not json", "nope", "invalid character"},
		{"no points", `{"points":[]}`, "no points"},
		{"descending", `{"points":[{"freq_hz":200,"gain_db":0,"phase_deg":0},{"freq_hz":100,"gain_db":0,"phase_deg":0}]}`, "point 2"},
		{"negative frequency", `{"points":[{"freq_hz":-1,"gain_db":0,"phase_deg":0}]}`, "point 1"},
	}
	for _, tc := range cases {
		_, err := ParseCalibration([]byte(tc.in), "cal.json")
		if err == nil || !strings.Contains(err.Error(), tc.want) || !strings.Contains(err.Error(), "cal.json") {
			t.Errorf("%s: err = %v, want one naming cal.json and %q", tc.name, err, tc.want)
		}
	}
}

func FuzzParseCalibration(f *testing.F) {
	f.Add([]byte(`{"schema":1,"points":[{"freq_hz":100,"gain_db":0.1,"phase_deg":-1},{"freq_hz":1000,"gain_db":0.2,"phase_deg":-3}]}`))
	f.Add([]byte(`{"points":[]}`))
	f.Add([]byte(`{"points":[{"freq_hz":1e308,"gain_db":1e308,"phase_deg":0}]}`))
	f.Fuzz(func(t *testing.T, data []byte) {
		c, err := ParseCalibration(data, "fuzz.json")
		if err != nil {
			return
		}
		for _, f := range []float64{1e-3, c.Points[0].FreqHz, 1e9} {
			if k := c.At(f); cmplx.IsNaN(k) {
				t.Fatalf("At(%g) = NaN for a calibration that parsed", f)
			}
		}
	})
}
