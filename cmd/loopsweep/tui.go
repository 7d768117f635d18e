package main

import (
	"os"

	"loopsweep/sweep"
	"loopsweep/tui"
)

// The sweep command calls runTUI when stdout is a terminal.
func init() { runTUI = runBenchScreen }

// configDir is where the screen remembers that the safety note was
// dismissed: os.UserConfigDir()/loopsweep ($XDG_CONFIG_HOME on Linux),
// or $LOOPSWEEP_CONFIG_DIR when set. "" (no config directory) shows the
// note every time.
func configDir() string {
	if d := os.Getenv("LOOPSWEEP_CONFIG_DIR"); d != "" {
		return d
	}
	d, err := tui.DefaultConfigDir()
	if err != nil {
		return ""
	}
	return d
}

// runBenchScreen shows a live sweep. The engine is already running; the
// screen stops it when the user quits, and so does this function on every
// other way out.
func runBenchScreen(eng *sweep.Engine, events <-chan sweep.Event, info TUIInfo) error {
	defer eng.Stop()
	dir := configDir()
	snap := eng.Snapshot()
	if snap.Instruments.GeneratorIDN == "" {
		snap.Instruments = info.Instruments
	}
	return tui.Run(tui.Options{
		Controller:  eng,
		Events:      events,
		Session:     snap,
		SessionFile: info.Out,
		State:       eng.State(),
		ShowSafety:  !tui.SafetyDismissed(dir),
		ConfigDir:   dir,
		PMTargetDeg: info.PMTargetDeg,
		GMTargetDB:  info.GMTargetDB,
	})
}
