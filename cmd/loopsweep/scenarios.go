package main

import (
	"encoding/json"
	"fmt"
	"io"
	"strings"

	"loopsweep/sim"
)

func init() {
	register(&command{
		name:    "scenarios",
		summary: "list the simulated bench's scenarios with their true margins",
		usage: `loopsweep scenarios [--json] [FILE...]

Lists the built-in scenarios of the simulated bench (and any scenario TOML
files given) with the margins of the model at each operating point:
crossover frequency (Hz), phase margin (degrees), phase crossover
frequency (Hz) and gain margin (dB), the worst when there are several,
searched from 1 Hz to half the switching frequency.`,
		run: runScenarios,
	})
}

// scenarioJSON is one scenario in --json output.
type scenarioJSON struct {
	Name            string   `json:"name"`
	Description     string   `json:"description"`
	OperatingPoints []opJSON `json:"operating_points"`
}

type opJSON struct {
	Name             string   `json:"name"`
	CrossoverHz      *float64 `json:"crossover_hz"`
	PhaseMarginDeg   *float64 `json:"phase_margin_deg"`
	PhaseCrossoverHz *float64 `json:"phase_crossover_hz"`
	GainMarginDB     *float64 `json:"gain_margin_db"`
}

func runScenarios(args []string, stdout, stderr io.Writer) error {
	c := commands["scenarios"]
	fs := newFlagSet(c, stderr)
	asJSON := fs.Bool("json", false, "print JSON")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	list := sim.Builtin()
	for _, p := range fs.Args() {
		sc, err := sim.LoadScenario(p)
		if err != nil {
			return badInput("%v", err)
		}
		list = append(list, sc)
	}
	out := make([]scenarioJSON, 0, len(list))
	for _, sc := range list {
		sj := scenarioJSON{Name: sc.Name, Description: sc.Description, OperatingPoints: []opJSON{}}
		for _, l := range sc.Loads() {
			tm, err := sc.TrueMargins(l)
			if err != nil {
				return fmt.Errorf("scenario %s load %s: %w", sc.Name, l, err)
			}
			sj.OperatingPoints = append(sj.OperatingPoints, opJSON{
				Name: l, CrossoverHz: tm.CrossoverHz, PhaseMarginDeg: tm.PhaseMarginDeg,
				PhaseCrossoverHz: tm.PhaseCrossoverHz, GainMarginDB: tm.GainMarginDB,
			})
		}
		out = append(out, sj)
		if !*asJSON {
			fmt.Fprintf(stdout, "%s\n  %s\n", sc.Name, sc.Description)
			for _, l := range sc.Loads() {
				tm, _ := sc.TrueMargins(l)
				fmt.Fprintf(stdout, "  %-8s %s\n", l, marginsLine(tm))
			}
		}
	}
	if *asJSON {
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		return enc.Encode(out)
	}
	return nil
}

// marginsLine summarises true margins on one line.
func marginsLine(tm sim.TrueMargins) string {
	var b strings.Builder
	if tm.CrossoverHz != nil {
		fmt.Fprintf(&b, "crossover %s  PM %.1f°", hzText(*tm.CrossoverHz), *tm.PhaseMarginDeg)
	} else {
		b.WriteString("no gain crossover")
	}
	if tm.PhaseCrossoverHz != nil {
		fmt.Fprintf(&b, "  phase crossover %s  GM %.1f dB", hzText(*tm.PhaseCrossoverHz), *tm.GainMarginDB)
	} else {
		b.WriteString("  no phase crossover")
	}
	if len(tm.Gain) > 1 || len(tm.Phase) > 1 {
		fmt.Fprintf(&b, "  (%d gain, %d phase crossings; worst shown)", len(tm.Gain), len(tm.Phase))
	}
	if !tm.StableClosedLoop {
		b.WriteString("  UNSTABLE closed loop")
	}
	return b.String()
}

// hzText prints a frequency with an SI prefix.
func hzText(f float64) string {
	switch {
	case f >= 1e6:
		return fmt.Sprintf("%.3g MHz", f/1e6)
	case f >= 1e3:
		return fmt.Sprintf("%.3g kHz", f/1e3)
	}
	return fmt.Sprintf("%.3g Hz", f)
}
