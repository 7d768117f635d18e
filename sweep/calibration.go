package sweep

import (
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"math/cmplx"
	"os"
	"sort"
	"time"
)

// CalPoint is one frequency of a channel calibration: the ratio V2/V1
// measured with both probes on the same node.
type CalPoint struct {
	FreqHz   float64 `json:"freq_hz"`
	GainDB   float64 `json:"gain_db"`
	PhaseDeg float64 `json:"phase_deg"`
}

// Calibration is the two channels' gain and phase mismatch against
// frequency. A later sweep divides its measured V2/V1 by it.
type Calibration struct {
	Schema  int        `json:"schema"`
	Created time.Time  `json:"created"`
	Source  string     `json:"source,omitempty"` // what measured it
	Points  []CalPoint `json:"points"`
	// Name is the file it was loaded from (recorded in sessions).
	Name string `json:"-"`
}

// CalibrationFromSession turns a ratio sweep made with both probes on the
// same node into a calibration.
func CalibrationFromSession(s *Session) (*Calibration, error) {
	if s.Settings.Measure != MeasureRatio {
		return nil, errors.New("calibration: the sweep must measure ratio (both probes on one node)")
	}
	c := &Calibration{Schema: 1, Created: s.Updated, Source: s.Instruments.DigitizerIDN}
	for i := range s.Points {
		a, ok := s.Chosen(i)
		if !ok {
			continue
		}
		c.Points = append(c.Points, CalPoint{FreqHz: a.Tone(s.Points[i].FreqHz), GainDB: a.GainDB, PhaseDeg: a.PhaseDeg})
	}
	if len(c.Points) == 0 {
		return nil, errors.New("calibration: the sweep has no measured point")
	}
	return c, c.check()
}

func (c *Calibration) check() error {
	if len(c.Points) == 0 {
		return errors.New("calibration has no points")
	}
	for i, p := range c.Points {
		if !finite(p.FreqHz) || p.FreqHz <= 0 {
			return fmt.Errorf("calibration point %d: frequency %g Hz is not positive", i+1, p.FreqHz)
		}
		if !finite(p.GainDB) || !finite(p.PhaseDeg) {
			return fmt.Errorf("calibration point %d: gain %g dB or phase %g° is not finite", i+1, p.GainDB, p.PhaseDeg)
		}
		if i > 0 && p.FreqHz <= c.Points[i-1].FreqHz {
			return fmt.Errorf("calibration point %d: %g Hz is not above the previous point", i+1, p.FreqHz)
		}
	}
	return nil
}

// At returns the calibration ratio at f Hz: gain (dB) and phase (degrees,
// unwrapped between neighbours) interpolated linearly in log frequency,
// held flat beyond the ends.
func (c *Calibration) At(f float64) complex128 {
	p := c.Points
	if len(p) == 0 {
		return 1
	}
	g, ph := p[0].GainDB, p[0].PhaseDeg
	switch i := sort.Search(len(p), func(k int) bool { return p[k].FreqHz >= f }); {
	case i == 0:
	case i == len(p):
		g, ph = p[len(p)-1].GainDB, p[len(p)-1].PhaseDeg
	default:
		a, b := p[i-1], p[i]
		t := math.Log(f/a.FreqHz) / math.Log(b.FreqHz/a.FreqHz)
		g = a.GainDB + t*(b.GainDB-a.GainDB)
		pb := wrapNear(b.PhaseDeg, a.PhaseDeg)
		ph = a.PhaseDeg + t*(pb-a.PhaseDeg)
	}
	return cmplx.Rect(math.Pow(10, g/20), ph*math.Pi/180)
}

// SaveCalibration writes c to path atomically.
func SaveCalibration(path string, c *Calibration) error {
	data, err := json.MarshalIndent(c, "", "  ")
	if err != nil {
		return fmt.Errorf("encode calibration for %s: %w", path, err)
	}
	return writeAtomic(path, append(data, '\n'))
}

// LoadCalibration reads and checks a calibration file.
func LoadCalibration(path string) (*Calibration, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("read calibration: %w", err)
	}
	return ParseCalibration(data, path)
}

// ParseCalibration decodes and checks calibration JSON; name is the file
// it came from, for errors and the session record.
func ParseCalibration(data []byte, name string) (*Calibration, error) {
	var c Calibration
	if err := json.Unmarshal(data, &c); err != nil {
		return nil, fmt.Errorf("calibration %s: %w", name, err)
	}
	if err := c.check(); err != nil {
		return nil, fmt.Errorf("%s: %w", name, err)
	}
	c.Name = name
	return &c, nil
}
