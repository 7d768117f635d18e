package instr

import (
	"context"
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"
)

// Digitizer drives a two-channel digitizer through its profile. It
// satisfies sweep's Digitizer interface. It never closes the Session's
// Conn.
type Digitizer struct {
	s         *Session
	p         *DigitizerProfile
	idn       string
	maxPoints int

	cur        CaptureSettings // as the instrument reported at the last Configure
	configured bool
	format     [2]DataFormat
}

// NewDigitizer identifies the instrument (*IDN?), runs the profile's
// setup, reads the maximum record length if the profile says how, and
// checks the error queue.
func NewDigitizer(s *Session, p *Profile) (*Digitizer, error) {
	if p == nil || p.Digitizer == nil {
		return nil, fmt.Errorf("digitizer on %s: profile is not a digitizer profile", s.Addr())
	}
	d := &Digitizer{s: s, p: p.Digitizer, maxPoints: p.Digitizer.MaxPoints}
	ctx := context.Background()
	idn, err := s.IDN(ctx)
	if err != nil {
		return nil, fmt.Errorf("identify digitizer: %w", err)
	}
	d.idn = idn
	if d.p.CheckErrors {
		if err := s.Clear(ctx); err != nil {
			return nil, fmt.Errorf("clear digitizer status: %w", err)
		}
	}
	for _, c := range d.p.Setup {
		if err := s.Write(ctx, c); err != nil {
			return nil, fmt.Errorf("digitizer setup: %w", err)
		}
	}
	if d.p.MaxPointsQuery != "" {
		v, err := s.QueryNumber(ctx, d.p.MaxPointsQuery)
		if err != nil {
			return nil, fmt.Errorf("digitizer maximum record length: %w", err)
		}
		if v < 1 || v > math.MaxInt32 || v != math.Trunc(v) {
			return nil, fmt.Errorf("digitizer maximum record length: %q replied %g, not a positive integer", d.p.MaxPointsQuery, v)
		}
		d.maxPoints = int(v)
	}
	if err := d.check(ctx); err != nil {
		return nil, fmt.Errorf("digitizer setup: %w", err)
	}
	return d, nil
}

// IDN is the instrument's *IDN? reply.
func (d *Digitizer) IDN() string { return d.idn }

// SupportsAC reports whether the profile can AC-couple the channels.
func (d *Digitizer) SupportsAC() bool { return d.p.SupportsAC() }

// SupportsOffset reports whether the profile can set a channel's offset.
func (d *Digitizer) SupportsOffset() bool { return d.p.SupportsOffset() }

// MaxPoints is the largest record length per channel, from the profile
// (max_points) or its max_points_query; 0 means unknown.
func (d *Digitizer) MaxPoints() int { return d.maxPoints }

// Settings returns what the last Configure reported.
func (d *Digitizer) Settings() CaptureSettings { return d.cur }

func (d *Digitizer) check(ctx context.Context) error {
	if !d.p.CheckErrors {
		return nil
	}
	return d.s.DrainErrors(ctx)
}

// rangeValue converts a half-window (the window is offset ± half volts)
// to the number the profile's range command takes, and back.
func (d *Digitizer) rangeValue(half float64) float64 {
	switch d.p.RangeIs {
	case "full":
		return 2 * half
	case "per_division":
		return 2 * half / d.p.Divisions
	}
	return half
}

func (d *Digitizer) halfFromValue(v float64) float64 { return v / d.rangeValue(1) }

// Configure sends want (record length, sample interval, each channel's
// coupling, range and offset), reads back what the instrument chose
// where the profile gives queries, checks the error queue, and returns
// the actual settings. A setting the profile cannot express (AC coupling
// without coupling_ac, a nonzero offset without an offset command) is
// an error before anything is sent.
func (d *Digitizer) Configure(ctx context.Context, want CaptureSettings) (CaptureSettings, error) {
	d.configured = false
	if want.Points < 1 {
		return CaptureSettings{}, fmt.Errorf("configure digitizer: record length %d must be positive", want.Points)
	}
	if d.maxPoints > 0 && want.Points > d.maxPoints {
		return CaptureSettings{}, fmt.Errorf("configure digitizer: record length %d above the maximum %d", want.Points, d.maxPoints)
	}
	if !(want.IntervalS > 0) || math.IsInf(want.IntervalS, 0) {
		return CaptureSettings{}, fmt.Errorf("configure digitizer: sample interval %g s must be positive and finite", want.IntervalS)
	}
	for i, c := range want.Channels {
		if c.AC && !d.p.SupportsAC() {
			return CaptureSettings{}, fmt.Errorf("configure digitizer channel %d: AC coupling asked, but the profile has no coupling_ac", i+1)
		}
		if c.OffsetV != 0 && !d.p.SupportsOffset() {
			return CaptureSettings{}, fmt.Errorf("configure digitizer channel %d: offset %g V asked, but the profile has no offset command", i+1, c.OffsetV)
		}
		if !(c.RangeV > 0) || math.IsInf(c.RangeV, 0) {
			return CaptureSettings{}, fmt.Errorf("configure digitizer channel %d: range %g V must be positive and finite", i+1, c.RangeV)
		}
	}
	w := func(cmd, what string) error {
		if err := d.s.Write(ctx, cmd); err != nil {
			return fmt.Errorf("configure digitizer %s: %w", what, err)
		}
		return nil
	}
	if err := w(expand(d.p.Points, "n", strconv.Itoa(want.Points)), fmt.Sprintf("record length %d", want.Points)); err != nil {
		return CaptureSettings{}, err
	}
	if d.p.Interval != "" {
		if err := w(expand(d.p.Interval, "s", num(want.IntervalS)), fmt.Sprintf("sample interval %g s", want.IntervalS)); err != nil {
			return CaptureSettings{}, err
		}
	} else if err := w(expand(d.p.Rate, "hz", num(1/want.IntervalS)), fmt.Sprintf("sample rate %g Hz", 1/want.IntervalS)); err != nil {
		return CaptureSettings{}, err
	}
	for i, c := range want.Channels {
		ch := d.p.Channels[i]
		if c.AC {
			if err := w(expand(d.p.CouplingAC, "ch", ch), fmt.Sprintf("channel %d AC coupling", i+1)); err != nil {
				return CaptureSettings{}, err
			}
		} else if d.p.CouplingDC != "" {
			if err := w(expand(d.p.CouplingDC, "ch", ch), fmt.Sprintf("channel %d DC coupling", i+1)); err != nil {
				return CaptureSettings{}, err
			}
		}
		if err := w(expand(d.p.Range, "ch", ch, "v", num(d.rangeValue(c.RangeV))), fmt.Sprintf("channel %d range ±%g V", i+1, c.RangeV)); err != nil {
			return CaptureSettings{}, err
		}
		if d.p.Offset != "" {
			if err := w(expand(d.p.Offset, "ch", ch, "v", num(c.OffsetV)), fmt.Sprintf("channel %d offset %g V", i+1, c.OffsetV)); err != nil {
				return CaptureSettings{}, err
			}
		}
	}
	got, err := d.readBack(ctx, want)
	if err != nil {
		return CaptureSettings{}, err
	}
	if err := d.check(ctx); err != nil {
		return CaptureSettings{}, fmt.Errorf("configure digitizer: %w", err)
	}
	d.cur, d.configured = got, true
	return got, nil
}

// readBack asks for what the instrument chose; without a query the
// requested value stands.
func (d *Digitizer) readBack(ctx context.Context, want CaptureSettings) (CaptureSettings, error) {
	got := want
	q := func(cmd, what string) (float64, error) {
		v, err := d.s.QueryNumber(ctx, cmd)
		if err != nil {
			return 0, fmt.Errorf("read back digitizer %s: %w", what, err)
		}
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return 0, fmt.Errorf("read back digitizer %s: %q replied %g", what, cmd, v)
		}
		return v, nil
	}
	if d.p.PointsQuery != "" {
		v, err := q(d.p.PointsQuery, "record length")
		if err != nil {
			return got, err
		}
		if v < 1 || v != math.Trunc(v) || v > math.MaxInt32 {
			return got, fmt.Errorf("read back digitizer record length: %q replied %g, not a positive integer", d.p.PointsQuery, v)
		}
		got.Points = int(v)
	}
	switch {
	case d.p.IntervalQuery != "":
		v, err := q(d.p.IntervalQuery, "sample interval")
		if err != nil {
			return got, err
		}
		if v <= 0 {
			return got, fmt.Errorf("read back digitizer sample interval: %q replied %g s", d.p.IntervalQuery, v)
		}
		got.IntervalS = v
	case d.p.RateQuery != "":
		v, err := q(d.p.RateQuery, "sample rate")
		if err != nil {
			return got, err
		}
		if v <= 0 {
			return got, fmt.Errorf("read back digitizer sample rate: %q replied %g Hz", d.p.RateQuery, v)
		}
		got.IntervalS = 1 / v
	}
	for i := range got.Channels {
		ch := d.p.Channels[i]
		if d.p.RangeQuery != "" {
			v, err := q(expand(d.p.RangeQuery, "ch", ch), fmt.Sprintf("channel %d range", i+1))
			if err != nil {
				return got, err
			}
			got.Channels[i].RangeV = d.halfFromValue(v)
		}
		if d.p.OffsetQuery != "" {
			v, err := q(expand(d.p.OffsetQuery, "ch", ch), fmt.Sprintf("channel %d offset", i+1))
			if err != nil {
				return got, err
			}
			got.Channels[i].OffsetV = v
		}
		f := DataFormat{Encoding: d.p.Data.Encoding, LittleEndian: d.p.Data.LittleEndian, Scale: d.p.Data.Scale, Offset: d.p.Data.Offset}
		if d.p.Data.ScaleQuery != "" {
			v, err := q(expand(d.p.Data.ScaleQuery, "ch", ch), fmt.Sprintf("channel %d scale", i+1))
			if err != nil {
				return got, err
			}
			if v == 0 {
				return got, fmt.Errorf("read back digitizer channel %d scale: zero volts per code", i+1)
			}
			f.Scale = v
		}
		if d.p.Data.OffsetQuery != "" {
			v, err := q(expand(d.p.Data.OffsetQuery, "ch", ch), fmt.Sprintf("channel %d data offset", i+1))
			if err != nil {
				return got, err
			}
			f.Offset = v
		}
		d.format[i] = f
	}
	return got, nil
}

// recordTime is how long one acquisition of the configured record takes.
func (d *Digitizer) recordTime() time.Duration {
	t := float64(d.cur.Points) * d.cur.IntervalS
	return time.Duration(math.Min(t, 1e6) * float64(time.Second))
}

// Capture starts one acquisition, waits until it is complete (by *OPC?
// or by polling, as the profile says; the wait allows the record's own
// duration on top of the session timeout), fetches both channels into
// ch1 and ch2 (volts; each must have the configured length) and checks
// the error queue. A timeout returns an error wrapping ErrTimeout.
func (d *Digitizer) Capture(ctx context.Context, ch1, ch2 []float64) error {
	if !d.configured {
		return fmt.Errorf("capture on %s: Configure first", d.s.Addr())
	}
	n := d.cur.Points
	if len(ch1) != n || len(ch2) != n {
		return fmt.Errorf("capture on %s: buffers hold %d and %d samples, want %d", d.s.Addr(), len(ch1), len(ch2), n)
	}
	for _, c := range d.p.Start {
		if err := d.s.Write(ctx, c); err != nil {
			return fmt.Errorf("start acquisition: %w", err)
		}
	}
	rec := d.recordTime()
	switch d.p.Done.Method {
	case "opc":
		if err := d.s.OPC(ctx, 2*rec); err != nil {
			return fmt.Errorf("wait for acquisition: %w", err)
		}
	case "poll":
		if err := d.poll(ctx, rec); err != nil {
			return err
		}
	}
	for i, dst := range [2][]float64{ch1, ch2} {
		cmd := expand(d.p.Fetch, "ch", d.p.Channels[i])
		var wait time.Duration
		if i == 0 && d.p.Done.Method == "none" {
			wait = 2 * rec // the fetch itself waits for the record
		}
		if err := d.s.QueryBlockWait(ctx, cmd, d.format[i], dst, wait); err != nil {
			return fmt.Errorf("fetch channel %d: %w", i+1, err)
		}
	}
	if err := d.check(ctx); err != nil {
		return fmt.Errorf("capture: %w", err)
	}
	return nil
}

// poll asks the done query until it answers the done value, or until
// the record time plus the session timeout has passed.
func (d *Digitizer) poll(ctx context.Context, rec time.Duration) error {
	limit := time.Now().Add(2*rec + d.s.Timeout())
	want := strings.TrimSpace(d.p.Done.Value)
	for {
		r, err := d.s.Query(ctx, d.p.Done.Query)
		if err != nil {
			return fmt.Errorf("wait for acquisition: %w", err)
		}
		if strings.EqualFold(strings.TrimSpace(r), want) {
			return nil
		}
		if time.Now().After(limit) {
			return fmt.Errorf("wait for acquisition on %s: %q still answers %q, not %q, after %v: %w",
				d.s.Addr(), d.p.Done.Query, r, want, 2*rec+d.s.Timeout(), ErrTimeout)
		}
		t := time.NewTimer(d.p.Done.Poll)
		select {
		case <-ctx.Done():
			t.Stop()
			return fmt.Errorf("wait for acquisition on %s: %w", d.s.Addr(), ctx.Err())
		case <-t.C:
		}
	}
}
