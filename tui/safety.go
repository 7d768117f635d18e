package tui

import (
	"fmt"
	"os"
	"path/filepath"
)

// safetyText is the first-run note. It repeats the README's safety list.
var safetyText = []string{
	"Before you connect the bench",
	"",
	"loopsweep injects a signal into live power electronics.",
	"",
	"• Hazardous voltages: a converter's loop may sit at mains potential.",
	"• Inject through an isolating injection transformer across a small",
	"  resistor (about 10 Ω) inserted in the loop.",
	"• Never defeat the oscilloscope's protective earth; use differential",
	"  probes or isolation for mains-connected converters.",
	"• Start with a small amplitude and watch the converter while it runs.",
	"• The generator's output is turned off on every exit loopsweep sees,",
	"  not when a cable is pulled: you stay responsible for the bench.",
	"• Follow local electrical codes and licensed practice.",
	"",
	"enter: continue · d: continue and don't show this again",
}

// safetyFile is the file whose presence records that the note was
// dismissed for good.
const safetyFile = "safety-note-dismissed"

// DefaultConfigDir is where loopsweep keeps its per-user state:
// os.UserConfigDir()/loopsweep.
func DefaultConfigDir() (string, error) {
	d, err := os.UserConfigDir()
	if err != nil {
		return "", fmt.Errorf("find config directory: %w", err)
	}
	return filepath.Join(d, "loopsweep"), nil
}

// SafetyDismissed reports whether the note was dismissed for good in dir.
func SafetyDismissed(dir string) bool {
	if dir == "" {
		return false
	}
	_, err := os.Stat(filepath.Join(dir, safetyFile))
	return err == nil
}

// dismissSafety records the dismissal in dir.
func dismissSafety(dir string) error {
	if dir == "" {
		return nil
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return fmt.Errorf("remember safety note dismissal in %s: %w", dir, err)
	}
	p := filepath.Join(dir, safetyFile)
	if err := os.WriteFile(p, []byte("The first-run safety note was dismissed.\n"), 0o644); err != nil {
		return fmt.Errorf("remember safety note dismissal in %s: %w", p, err)
	}
	return nil
}
