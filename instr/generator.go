package instr

import (
	"context"
	"fmt"
	"math"
)

// Generator drives a signal generator through its profile. It satisfies
// sweep's Generator interface. It never closes the Session's Conn.
type Generator struct {
	s   *Session
	p   *GeneratorProfile
	idn string
}

// NewGenerator identifies the instrument (*IDN?), turns its output off,
// runs the profile's setup commands and offset, and checks the error
// queue. Each step is bounded by the session timeout.
func NewGenerator(s *Session, p *Profile) (*Generator, error) {
	if p == nil || p.Generator == nil {
		return nil, fmt.Errorf("generator on %s: profile is not a generator profile", s.Addr())
	}
	g := &Generator{s: s, p: p.Generator}
	ctx := context.Background()
	idn, err := s.IDN(ctx)
	if err != nil {
		return nil, fmt.Errorf("identify generator: %w", err)
	}
	g.idn = idn
	if g.p.CheckErrors {
		// Start from an empty queue so later errors belong to loopsweep.
		if err := s.Clear(ctx); err != nil {
			return nil, fmt.Errorf("clear generator status: %w", err)
		}
	}
	if err := g.SetOutput(ctx, false); err != nil {
		return nil, err
	}
	for _, c := range g.p.Setup {
		if err := s.Write(ctx, c); err != nil {
			return nil, fmt.Errorf("generator setup: %w", err)
		}
	}
	if g.p.Offset != "" {
		if err := s.Write(ctx, expand(g.p.Offset, "v", num(g.p.OffsetV))); err != nil {
			return nil, fmt.Errorf("set generator offset %g V: %w", g.p.OffsetV, err)
		}
	}
	if err := g.check(ctx); err != nil {
		return nil, fmt.Errorf("generator setup: %w", err)
	}
	return g, nil
}

// IDN is the instrument's *IDN? reply.
func (g *Generator) IDN() string { return g.idn }

// MaxVpp is the profile's amplitude limit in volts peak-to-peak; 0 means
// the profile gives none.
func (g *Generator) MaxVpp() float64 { return g.p.MaxVpp }

func (g *Generator) check(ctx context.Context) error {
	if !g.p.CheckErrors {
		return nil
	}
	return g.s.DrainErrors(ctx)
}

// SetFrequency sets the output frequency in Hz and checks the error
// queue. A timeout returns an error wrapping ErrTimeout.
func (g *Generator) SetFrequency(ctx context.Context, hz float64) error {
	if !(hz > 0) || math.IsInf(hz, 0) {
		return fmt.Errorf("set frequency %g Hz: must be positive and finite", hz)
	}
	if err := g.s.Write(ctx, expand(g.p.Frequency, "hz", num(hz))); err != nil {
		return fmt.Errorf("set frequency %g Hz: %w", hz, err)
	}
	if err := g.check(ctx); err != nil {
		return fmt.Errorf("set frequency %g Hz: %w", hz, err)
	}
	return nil
}

// Frequency reads the frequency back, Hz.
func (g *Generator) Frequency(ctx context.Context) (float64, error) {
	if g.p.FrequencyQuery == "" {
		return 0, fmt.Errorf("read frequency on %s: profile has no frequency_query", g.s.Addr())
	}
	return g.s.QueryNumber(ctx, g.p.FrequencyQuery)
}

// ampValue converts a sine's peak-to-peak volts to the profile's unit:
// Vpk = Vpp/2, Vrms = Vpp/(2√2).
func ampValue(unit string, vpp float64) float64 {
	switch unit {
	case "vpk":
		return vpp / 2
	case "vrms":
		return vpp / (2 * math.Sqrt2)
	}
	return vpp
}

// SetAmplitude sets the sine amplitude in volts peak-to-peak, converted
// to the unit the profile's template names, and checks the error queue.
// An amplitude above the profile's max_vpp is refused before sending.
func (g *Generator) SetAmplitude(ctx context.Context, vpp float64) error {
	if !(vpp >= 0) || math.IsInf(vpp, 0) {
		return fmt.Errorf("set amplitude %g Vpp: must be non-negative and finite", vpp)
	}
	if g.p.MaxVpp > 0 && vpp > g.p.MaxVpp {
		return fmt.Errorf("set amplitude %g Vpp: above the profile's max_vpp %g", vpp, g.p.MaxVpp)
	}
	v := ampValue(g.p.ampUnit, vpp)
	if err := g.s.Write(ctx, expand(g.p.Amplitude, g.p.ampUnit, num(v))); err != nil {
		return fmt.Errorf("set amplitude %g Vpp: %w", vpp, err)
	}
	if err := g.check(ctx); err != nil {
		return fmt.Errorf("set amplitude %g Vpp: %w", vpp, err)
	}
	return nil
}

// Amplitude reads the amplitude back, converted to volts peak-to-peak.
func (g *Generator) Amplitude(ctx context.Context) (float64, error) {
	if g.p.AmplitudeQuery == "" {
		return 0, fmt.Errorf("read amplitude on %s: profile has no amplitude_query", g.s.Addr())
	}
	v, err := g.s.QueryNumber(ctx, g.p.AmplitudeQuery)
	if err != nil {
		return 0, err
	}
	return v / ampValue(g.p.ampUnit, 1), nil
}

// SetOutput switches the output. Turning it off may be called at any
// time, including after ctx is cancelled: it then runs under the
// session timeout alone, so every exit path can make the bench safe.
func (g *Generator) SetOutput(ctx context.Context, on bool) error {
	cmd, what := g.p.OutputOn, "on"
	if !on {
		cmd, what = g.p.OutputOff, "off"
		ctx = context.WithoutCancel(ctx)
	}
	if err := g.s.Write(ctx, cmd); err != nil {
		return fmt.Errorf("output %s: %w", what, err)
	}
	if err := g.check(ctx); err != nil {
		return fmt.Errorf("output %s: %w", what, err)
	}
	return nil
}

// Output reads the output state back.
func (g *Generator) Output(ctx context.Context) (bool, error) {
	if g.p.OutputQuery == "" {
		return false, fmt.Errorf("read output state on %s: profile has no output_query", g.s.Addr())
	}
	r, err := g.s.Query(ctx, g.p.OutputQuery)
	if err != nil {
		return false, err
	}
	on, err := ParseBool(r)
	if err != nil {
		return false, fmt.Errorf("%s on %s: %w", g.p.OutputQuery, g.s.Addr(), err)
	}
	return on, nil
}
