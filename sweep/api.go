package sweep

// This file fixes the exported contract that tui and cmd build on. Owners
// may add fields and methods; renaming or removing needs every caller
// updated in the same commit.

import (
	"context"
	"time"

	"loopsweep/analysis"
	"loopsweep/instr"
)

// Generator is the signal source. Each call blocks until the instrument
// has accepted the setting or the transport's deadline fires; a timeout
// returns an error wrapping instr.ErrTimeout.
type Generator interface {
	SetFrequency(ctx context.Context, hz float64) error
	SetAmplitude(ctx context.Context, vpp float64) error
	SetOutput(ctx context.Context, on bool) error
}

// Digitizer captures both channels.
type Digitizer interface {
	// Configure asks for the settings and returns what the instrument
	// actually chose (rounded sample interval, range, record length).
	Configure(ctx context.Context, want instr.CaptureSettings) (instr.CaptureSettings, error)
	// Capture acquires one record of the configured length into ch1 and
	// ch2 (volts; len(ch1) == len(ch2) == configured Points) and blocks
	// until the acquisition is complete.
	Capture(ctx context.Context, ch1, ch2 []float64) error
}

// Measure selects what a sweep computes from the two channels.
type Measure string

const (
	MeasureLoop  Measure = "loop"  // L = −V2/V1, with margins
	MeasureRatio Measure = "ratio" // H = V2/V1, no margins
)

// AmpBreak is one breakpoint of an amplitude profile; amplitudes are
// interpolated in log frequency between breakpoints.
type AmpBreak struct {
	FreqHz float64 `json:"freq_hz"`
	Vpp    float64 `json:"vpp"`
}

// Settings are a sweep's plan and measurement settings. Zero values are
// replaced by Defaults() where documented.
type Settings struct {
	StartHz     float64   `json:"start_hz"`
	StopHz      float64   `json:"stop_hz"`
	PerDecade   int       `json:"per_decade,omitempty"`     // log spacing (default 10)
	LinearStep  float64   `json:"linear_step_hz,omitempty"` // linear spacing instead, Hz
	Frequencies []float64 `json:"frequencies_hz,omitempty"` // explicit list instead

	Measure Measure `json:"measure"`

	AmpVpp        float64    `json:"amp_vpp"`                 // fixed amplitude, volts peak-to-peak
	MaxAmpVpp     float64    `json:"max_amp_vpp"`             // hard cap, never exceeded
	AmpProfile    []AmpBreak `json:"amp_profile,omitempty"`   // amplitude against frequency
	AutoAmp       bool       `json:"auto_amp,omitempty"`      // adjust per point to reach TargetSNRdB
	TargetSNRdB   float64    `json:"target_snr_db,omitempty"` // for AutoAmp
	MaxHarmonicDB float64    `json:"max_harmonic_dbc,omitempty"`

	SettleCycles float64       `json:"settle_cycles"` // cycles to wait after a change
	SettleMin    time.Duration `json:"settle_min_ns"` // and at least this long
	Cycles       int           `json:"cycles"`        // minimum cycles per record
	MinPerCycle  int           `json:"min_samples_per_cycle"`
	SwitchingHz  float64       `json:"switching_hz,omitempty"` // keep its aliases off the tone

	MinSNRdB    float64 `json:"min_snr_db"`   // below this a point is retried
	MaxAttempts int     `json:"max_attempts"` // attempts before a point is flagged

	RefinePMDeg  float64 `json:"refine_pm_deg"` // refinement target for PM uncertainty
	RefineGMDB   float64 `json:"refine_gm_db"`  // and for GM uncertainty
	RefineBudget int     `json:"refine_budget"` // extra points refinement may add
}

// ChannelReading is one channel's tone as recorded in a session.
type ChannelReading struct {
	AmpPeakV float64 `json:"amp_peak_v"`
	PhaseDeg float64 `json:"phase_deg"`
	DCV      float64 `json:"dc_v"`
	NoiseV   float64 `json:"noise_rms_v"`
	SNRdB    float64 `json:"snr_db"`
	H2dBc    float64 `json:"h2_dbc"`
	H3dBc    float64 `json:"h3_dbc"`
	Clipped  bool    `json:"clipped"`
	RangeV   float64 `json:"range_v"`
	OffsetV  float64 `json:"offset_v"`
}

// Attempt is one measurement of a point; every attempt is kept.
type Attempt struct {
	Started  time.Time `json:"started"`
	Finished time.Time `json:"finished"`
	// FreqHz is the tone actually injected: the point's frequency moved
	// (by well under 1%) so the record holds whole cycles. Zero in files
	// that predate it means the point's frequency.
	FreqHz        float64        `json:"freq_hz,omitempty"`
	AmpVpp        float64        `json:"amp_vpp"`
	IntervalS     float64        `json:"sample_interval_s"`
	RecordLength  int            `json:"record_length"`
	Cycles        float64        `json:"cycles"`
	Ch1           ChannelReading `json:"ch1"`
	Ch2           ChannelReading `json:"ch2"`
	Re            float64        `json:"re"` // the response H (or L), real part
	Im            float64        `json:"im"` // imaginary part
	GainDB        float64        `json:"gain_db"`
	PhaseDeg      float64        `json:"phase_deg"` // wrapped to (−180, 180]
	GainSigmaDB   float64        `json:"gain_sigma_db"`
	PhaseSigmaDeg float64        `json:"phase_sigma_deg"`
	Reason        string         `json:"reason,omitempty"`  // why it was made (retry, user, refine)
	Problem       string         `json:"problem,omitempty"` // what was wrong with it, if anything
}

// Point is one frequency of a session with its history of attempts.
type Point struct {
	FreqHz   float64   `json:"freq_hz"`
	Attempts []Attempt `json:"attempts"`
	// Chosen indexes the attempt that counts; −1 means the best by
	// uncertainty (the default).
	Chosen  int    `json:"chosen"`
	Flagged bool   `json:"flagged"`
	Flag    string `json:"flag,omitempty"` // why it is flagged
	Refined bool   `json:"refined,omitempty"`
}

// Note is a user's remark, stamped.
type Note struct {
	At   time.Time `json:"at"`
	Text string    `json:"text"`
}

// Instruments records what measured the session.
type Instruments struct {
	GeneratorIDN     string `json:"generator_idn"`
	DigitizerIDN     string `json:"digitizer_idn"`
	GeneratorAddr    string `json:"generator_address"`
	DigitizerAddr    string `json:"digitizer_address"`
	GeneratorProfile string `json:"generator_profile"`
	DigitizerProfile string `json:"digitizer_profile"`
}

// Session is everything one measurement produced; it is what the session
// file holds.
type Session struct {
	Schema         int         `json:"schema"`
	ToolVersion    string      `json:"tool_version"`
	Created        time.Time   `json:"created"`
	Updated        time.Time   `json:"updated"`
	OperatingPoint string      `json:"operating_point"`
	Notes          []Note      `json:"notes,omitempty"`
	Settings       Settings    `json:"settings"`
	Instruments    Instruments `json:"instruments"`
	Calibration    string      `json:"calibration,omitempty"` // file applied, if any
	Points         []Point     `json:"points"`
	Complete       bool        `json:"complete"`
}

// State is the engine's state.
type State int

const (
	Idle State = iota
	Running
	Paused
	Refining
	Done
	Failed
	Stopped
	// Reconnecting: an instrument stopped answering (a timeout or a lost
	// connection); the output is off and the engine is opening the
	// instruments again (Config.Reconnect) before it resumes at the
	// point that failed.
	Reconnecting
)

// Event is what the engine publishes; front ends switch on the type.
type Event interface{ event() }

type (
	// PointStarted: the engine began an attempt at point Index.
	PointStarted struct {
		Index   int
		FreqHz  float64
		Attempt int
	}
	// PointMeasured: point Index has a new attempt (Point is a copy).
	PointMeasured struct {
		Index int
		Point Point
	}
	// PointFlagged: point Index stayed bad.
	PointFlagged struct {
		Index  int
		Reason string
	}
	// MarginsUpdated: margins recomputed from the chosen attempts.
	MarginsUpdated struct{ Margins analysis.Margins }
	// StateChanged: the engine moved to State; Msg says why.
	StateChanged struct {
		State State
		Msg   string
	}
	// ErrorEvent: a fault; the engine pauses or fails as State says.
	ErrorEvent struct{ Err error }
	// PointAdded: refinement inserted a point at Index.
	PointAdded struct {
		Index  int
		FreqHz float64
	}
	// InstrumentLost: an instrument fault (IsInstrumentFault) cut the
	// attempt at point Index short and the attempt was dropped. Err
	// names the command that failed. Published at once; the engine then
	// turns the output off, saves the session (WaitingForInstruments)
	// and reconnects, for at most Window before it gives up.
	InstrumentLost struct {
		Index  int
		FreqHz float64
		Err    error
		Window time.Duration
	}
	// WaitingForInstruments: after InstrumentLost, the output off was
	// sent (OffErr nil: the generator accepted it; otherwise why not,
	// and the output may still be on), the session saved (SaveErr), and
	// the engine reconnects for at most Window from now.
	WaitingForInstruments struct {
		OffErr, SaveErr error
		Window          time.Duration
	}
	// ReconnectFailed: reconnection try Try (from 1) failed with Err;
	// the next try comes after Retry.
	ReconnectFailed struct {
		Try   int
		Err   error
		Retry time.Duration
	}
	// Reconnected: the instruments answer again after Tries tries and
	// After since the fault; the sweep resumes at point Index (FreqHz),
	// the one that failed, with its settings applied afresh.
	Reconnected struct {
		Tries  int
		After  time.Duration
		Index  int
		FreqHz float64
	}
)

func (PointStarted) event()          {}
func (PointMeasured) event()         {}
func (PointFlagged) event()          {}
func (MarginsUpdated) event()        {}
func (StateChanged) event()          {}
func (ErrorEvent) event()            {}
func (PointAdded) event()            {}
func (InstrumentLost) event()        {}
func (WaitingForInstruments) event() {}
func (ReconnectFailed) event()       {}
func (Reconnected) event()           {}
