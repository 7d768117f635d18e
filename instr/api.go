package instr

// This file fixes the exported contract that sweep and cmd build on.
// Owners may add fields and methods; renaming or removing needs every
// caller updated in the same commit.

// ChannelSettings are one digitizer channel's input settings.
type ChannelSettings struct {
	// RangeV is the full scale: the input window is OffsetV ± RangeV volts.
	RangeV float64
	// OffsetV is the centre of the input window, volts.
	OffsetV float64
	// AC selects AC coupling (only where the profile offers it).
	AC bool
}

// CaptureSettings ask for, or report, one two-channel acquisition.
type CaptureSettings struct {
	Points    int     // samples per channel
	IntervalS float64 // sample interval, seconds
	Channels  [2]ChannelSettings
}
