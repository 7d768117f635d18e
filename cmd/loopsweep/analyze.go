package main

import (
	"bytes"
	"encoding/json"
	"flag"
	"fmt"
	"io"
	"math"
	"math/cmplx"
	"os"
	"path/filepath"
	"strings"
	"text/tabwriter"

	"loopsweep/analysis"
	"loopsweep/sweep"
)

func init() {
	register(&command{
		name:    "analyze",
		summary: "margins, derived views and points of saved sessions or loop-gain CSV files",
		usage: `loopsweep analyze FILE... [--json] [--csv] [--pm-min DEG] [--gm-min DB]

Prints, for each FILE (a session saved by 'loopsweep sweep', or a CSV with
columns frequency_hz, gain_db, phase_deg and a header row; '#' lines are
comments), the margins summary (the same numbers as the live screen), the
derived views — closed loop T = L/(1+L), sensitivity S = 1/(1+L) and its
peak Ms, the step overshoot predicted from the phase margin by the
second-order approximation — and the points table. With several files it
adds the margins side by side and the worst case. --json prints the same
keys as 'sweep --json' (one object per file; several files give
{"files": [...], "worst": {...}}); --csv writes the points of one file as
RFC 4180 CSV with units in the column names.`,
		run: runAnalyze,
	})
}

// input is one file given to analyze or plot.
type input struct {
	path    string
	label   string         // operating point, or the file's base name
	session *sweep.Session // the file's session, or one built from the CSV
	fromCSV bool
	sum     sweep.SummaryJSON
	curve   []analysis.Point // chosen attempts, phase unwrapped (Session.Curve)
	// marginsErr says why the margins could not be computed ("" when
	// they were, or for a ratio session).
	marginsErr string
}

// loadInput reads a session (a file starting with a JSON object) or a
// loop-gain CSV. Bad content is a usageError naming the file (and line).
func loadInput(path string) (*input, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, badInput("read %v", err)
	}
	in := &input{path: path}
	if sweep.LooksLikeJSON(data) {
		s, err := sweep.ParseSession(data, path)
		if err != nil {
			return nil, badInput("%v", err)
		}
		in.session = s
	} else {
		pts, err := sweep.ReadCSV(bytes.NewReader(data), path)
		if err != nil {
			return nil, badInput("%v (neither a session file nor a loop-gain CSV)", err)
		}
		in.session = sessionFromPoints(pts)
		in.fromCSV = true
	}
	in.label = in.session.OperatingPoint
	if in.label == "" {
		in.label = filepath.Base(path)
	}
	// A session too short for margins (an interrupted sweep) still has
	// its points to show: keep the summary and say why margins are absent.
	if in.sum, err = sweep.Summary(in.session); err != nil {
		in.marginsErr = err.Error()
	}
	in.curve = in.session.Curve()
	return in, nil
}

// sessionFromPoints wraps CSV points as a loop session with one attempt
// per point, so margins and summary come from the same code as a
// measured session's.
func sessionFromPoints(pts []analysis.Point) *sweep.Session {
	s := &sweep.Session{Schema: sweep.SchemaVersion, Settings: sweep.Settings{Measure: sweep.MeasureLoop}, Complete: true}
	for _, p := range pts {
		h := cmplx.Rect(analysis.RatioFromDB(p.GainDB), p.PhaseDeg*math.Pi/180)
		s.Points = append(s.Points, sweep.Point{FreqHz: p.FreqHz, Chosen: -1, Attempts: []sweep.Attempt{{
			GainDB: p.GainDB, PhaseDeg: p.PhaseDeg, GainSigmaDB: p.GainSigmaDB, PhaseSigmaDeg: p.PhaseSigmaDeg,
			Re: real(h), Im: imag(h),
		}}})
	}
	return s
}

// derivedPoint is one frequency of the derived views.
type derivedPoint struct {
	FreqHz float64
	L      complex128 // loop gain
	T      complex128 // closed loop L/(1+L)
	S      complex128 // sensitivity 1/(1+L)
}

func derive(curve []analysis.Point) []derivedPoint {
	out := make([]derivedPoint, len(curve))
	for i, p := range curve {
		L := cmplx.Rect(analysis.RatioFromDB(p.GainDB), p.PhaseDeg*math.Pi/180)
		out[i] = derivedPoint{p.FreqHz, L, analysis.ClosedLoop(L), analysis.Sensitivity(L)}
	}
	return out
}

// derivedJSON are the derived views' figures; nil when they do not exist.
type derivedJSON struct {
	// SensitivityPeak is Ms = 1/modulus margin (interpolated, as the
	// margins), and in dB; at SensitivityPeakHz.
	SensitivityPeak   *float64 `json:"sensitivity_peak"`
	SensitivityPeakDB *float64 `json:"sensitivity_peak_db"`
	SensitivityPeakHz *float64 `json:"sensitivity_peak_hz"`
	// ClosedLoopPeakDB is max|T| over the measured points, dB, at
	// ClosedLoopPeakHz; ClosedLoopBandwidthHz is the first frequency
	// above the peak where |T| falls through −3 dB (interpolated in log
	// frequency), null when it stays above within the band.
	ClosedLoopPeakDB      *float64 `json:"closed_loop_peak_db"`
	ClosedLoopPeakHz      *float64 `json:"closed_loop_peak_hz"`
	ClosedLoopBandwidthHz *float64 `json:"closed_loop_bandwidth_hz"`
	// OvershootPct is the step overshoot predicted from the worst phase
	// margin by the second-order approximation (analysis.OvershootFromPM;
	// Ogata; Franklin, Powell & Emami-Naeini), percent.
	OvershootPct *float64 `json:"overshoot_pct"`
	// MeetsTargets: the worst PM and GM are at least --pm-min and
	// --gm-min; null when either margin is not reached.
	MeetsTargets *bool `json:"meets_targets"`
}

// analyzeJSON is one file's --json object: the sweep summary's keys and
// the derived views'.
type analyzeJSON struct {
	File           string `json:"file"`
	OperatingPoint string `json:"operating_point"`
	MarginsError   string `json:"margins_error,omitempty"` // why the margins are null, when not for want of a crossing
	sweep.SummaryJSON
	derivedJSON
}

type targets struct{ pmMin, gmMin float64 }

func fptr(x float64) *float64 {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return nil
	}
	return &x
}

func derivedOf(in *input, tg targets) derivedJSON {
	var d derivedJSON
	if in.sum.Measure == sweep.MeasureRatio {
		return d
	}
	if mm := in.sum.ModulusMargin; mm != nil && *mm > 0 {
		d.SensitivityPeak = fptr(1 / *mm)
		d.SensitivityPeakDB = fptr(analysis.DBFromRatio(1 / *mm))
		d.SensitivityPeakHz = in.sum.ModulusFreqHz
	}
	dp := derive(in.curve)
	peak := -1
	for i, p := range dp {
		if peak < 0 || cmplx.Abs(p.T) > cmplx.Abs(dp[peak].T) {
			peak = i
		}
	}
	if peak >= 0 {
		d.ClosedLoopPeakDB = fptr(analysis.DBFromRatio(cmplx.Abs(dp[peak].T)))
		d.ClosedLoopPeakHz = fptr(dp[peak].FreqHz)
		const bwDB = -3
		for i := peak + 1; i < len(dp); i++ {
			g0 := analysis.DBFromRatio(cmplx.Abs(dp[i-1].T))
			g1 := analysis.DBFromRatio(cmplx.Abs(dp[i].T))
			if g0 >= bwDB && g1 < bwDB {
				t := (bwDB - g0) / (g1 - g0)
				lf := math.Log(dp[i-1].FreqHz) + t*math.Log(dp[i].FreqHz/dp[i-1].FreqHz)
				d.ClosedLoopBandwidthHz = fptr(math.Exp(lf))
				break
			}
		}
	}
	if pm := in.sum.PhaseMarginDeg; pm != nil {
		if os, err := analysis.OvershootFromPM(*pm); err == nil {
			d.OvershootPct = fptr(100 * os)
		}
	}
	if in.sum.PhaseMarginDeg != nil && in.sum.GainMarginDB != nil {
		ok := *in.sum.PhaseMarginDeg >= tg.pmMin && *in.sum.GainMarginDB >= tg.gmMin
		d.MeetsTargets = &ok
	}
	return d
}

// worstJSON names, for each margin, the file with the smallest one.
type worstJSON struct {
	PhaseMarginDeg  *float64 `json:"phase_margin_deg"`
	PhaseMarginFile string   `json:"phase_margin_file,omitempty"`
	CrossoverHz     *float64 `json:"crossover_hz"`
	GainMarginDB    *float64 `json:"gain_margin_db"`
	GainMarginFile  string   `json:"gain_margin_file,omitempty"`
	ModulusMargin   *float64 `json:"modulus_margin"`
	ModulusFile     string   `json:"modulus_margin_file,omitempty"`
	OvershootPct    *float64 `json:"overshoot_pct"`
	MeetsTargets    *bool    `json:"meets_targets"`
}

func worstOf(ins []*input, ds []derivedJSON) worstJSON {
	var w worstJSON
	all := true
	for i, in := range ins {
		s := in.sum
		if s.PhaseMarginDeg != nil && (w.PhaseMarginDeg == nil || *s.PhaseMarginDeg < *w.PhaseMarginDeg) {
			w.PhaseMarginDeg, w.CrossoverHz, w.PhaseMarginFile = s.PhaseMarginDeg, s.CrossoverHz, in.path
			w.OvershootPct = ds[i].OvershootPct
		}
		if s.GainMarginDB != nil && (w.GainMarginDB == nil || *s.GainMarginDB < *w.GainMarginDB) {
			w.GainMarginDB, w.GainMarginFile = s.GainMarginDB, in.path
		}
		if s.ModulusMargin != nil && (w.ModulusMargin == nil || *s.ModulusMargin < *w.ModulusMargin) {
			w.ModulusMargin, w.ModulusFile = s.ModulusMargin, in.path
		}
		if ds[i].MeetsTargets == nil {
			all = false
		} else if !*ds[i].MeetsTargets {
			f := false
			w.MeetsTargets = &f
		}
	}
	if w.MeetsTargets == nil && all && len(ins) > 0 {
		t := true
		w.MeetsTargets = &t
	}
	return w
}

func runAnalyze(args []string, stdout, stderr io.Writer) error {
	c := commands["analyze"]
	fs := newFlagSet(c, stderr)
	asJSON := fs.Bool("json", false, "print JSON (the keys of 'sweep --json' plus the derived views)")
	asCSV := fs.Bool("csv", false, "write the points of one FILE as RFC 4180 CSV")
	pmMin := fs.Float64("pm-min", 45, "phase margin target, degrees (common practice: 45°, 60° for critical loads)")
	gmMin := fs.Float64("gm-min", 6, "gain margin target, dB (common practice: 6–10 dB)")
	files, err := parseFlagsAndFiles(fs, args)
	if err != nil {
		return err
	}
	switch {
	case len(files) == 0:
		return badInput("no FILE given (a session .json or a loop-gain .csv)")
	case *asJSON && *asCSV:
		return badInput("--json and --csv: choose one")
	case *asCSV && len(files) > 1:
		return badInput("--csv writes one file's points; %d files given", len(files))
	case math.IsNaN(*pmMin) || math.IsInf(*pmMin, 0):
		return badInput("--pm-min %v: not a finite number of degrees", *pmMin)
	case math.IsNaN(*gmMin) || math.IsInf(*gmMin, 0):
		return badInput("--gm-min %v: not a finite number of dB", *gmMin)
	}
	tg := targets{*pmMin, *gmMin}
	var ins []*input
	var ds []derivedJSON
	for _, f := range files {
		in, err := loadInput(f)
		if err != nil {
			return err
		}
		ins = append(ins, in)
		ds = append(ds, derivedOf(in, tg))
	}
	switch {
	case *asCSV:
		return sweep.WriteCSV(stdout, ins[0].session)
	case *asJSON:
		objs := make([]analyzeJSON, len(ins))
		for i, in := range ins {
			objs[i] = analyzeJSON{File: in.path, OperatingPoint: in.session.OperatingPoint, MarginsError: in.marginsErr, SummaryJSON: in.sum, derivedJSON: ds[i]}
		}
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		if len(objs) == 1 {
			return enc.Encode(objs[0])
		}
		return enc.Encode(struct {
			Files []analyzeJSON `json:"files"`
			Worst worstJSON     `json:"worst"`
		}{objs, worstOf(ins, ds)})
	}
	for i, in := range ins {
		if i > 0 {
			fmt.Fprintln(stdout)
		}
		if err := writeAnalysis(stdout, in, ds[i], tg); err != nil {
			return err
		}
	}
	if len(ins) > 1 {
		fmt.Fprintln(stdout)
		return writeComparison(stdout, ins, ds, worstOf(ins, ds), tg)
	}
	return nil
}

// parseFlagsAndFiles parses args allowing flags after the files too
// ("analyze a.json --json" as well as "analyze --json a.json"); "--"
// ends the flags. It returns the files in order.
func parseFlagsAndFiles(fs *flag.FlagSet, args []string) ([]string, error) {
	var files []string
	for {
		if err := parseFlags(fs, args); err != nil {
			return nil, err
		}
		rest := fs.Args()
		if len(rest) == 0 {
			return files, nil
		}
		if len(args) > len(rest) && args[len(args)-len(rest)-1] == "--" {
			return append(files, rest...), nil
		}
		files = append(files, rest[0])
		args = rest[1:]
	}
}

func orNA(p *float64, format string) string {
	if p == nil {
		return "not reached"
	}
	return fmt.Sprintf(format, *p)
}

func writeAnalysis(w io.Writer, in *input, d derivedJSON, tg targets) error {
	kind := "session"
	if in.fromCSV {
		kind = "loop-gain CSV"
	}
	fmt.Fprintf(w, "== %s (%s)\n", in.path, kind)
	s := in.session
	if !in.fromCSV {
		if s.OperatingPoint != "" {
			fmt.Fprintf(w, "operating point: %s\n", s.OperatingPoint)
		}
		fmt.Fprintf(w, "measured: %s with loopsweep %s, schema %d, complete: %v\n", s.Created.Format("2006-01-02 15:04:05 MST"), s.ToolVersion, s.Schema, s.Complete)
		if s.Instruments.GeneratorIDN != "" || s.Instruments.DigitizerIDN != "" {
			fmt.Fprintf(w, "generator: %s\ndigitizer: %s\n", s.Instruments.GeneratorIDN, s.Instruments.DigitizerIDN)
		}
		for _, n := range s.Notes {
			fmt.Fprintf(w, "note (%s): %s\n", n.At.Format("2006-01-02 15:04"), n.Text)
		}
	}
	if in.marginsErr != "" {
		fmt.Fprintf(w, "points: %d measured, %d flagged\nmargins: not computed (%s)\n", len(in.sum.Points), in.sum.Flagged, in.marginsErr)
	} else if err := in.sum.WriteText(w); err != nil {
		return err
	}
	if in.sum.Measure != sweep.MeasureRatio {
		fmt.Fprintf(w, "sensitivity peak Ms: %s", orNA(d.SensitivityPeak, "%.3f"))
		if d.SensitivityPeak != nil {
			fmt.Fprintf(w, " (%.2f dB) at %s", *d.SensitivityPeakDB, orNA(d.SensitivityPeakHz, "%.4g Hz"))
		}
		fmt.Fprintf(w, "\nclosed-loop peak |T|: %s at %s, -3 dB bandwidth: %s\n",
			orNA(d.ClosedLoopPeakDB, "%.2f dB"), orNA(d.ClosedLoopPeakHz, "%.4g Hz"), orNA(d.ClosedLoopBandwidthHz, "%.4g Hz"))
		fmt.Fprintf(w, "step overshoot predicted from PM (second-order approximation; Ogata; Franklin, Powell & Emami-Naeini): %s\n",
			orNA(d.OvershootPct, "%.1f %%"))
		fmt.Fprintf(w, "targets PM ≥ %g°, GM ≥ %g dB: %s\n", tg.pmMin, tg.gmMin, verdict(d.MeetsTargets))
	}
	fmt.Fprintln(w, "points:")
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "frequency_hz\tgain_db\tphase_deg\tgain_sigma_db\tphase_sigma_deg\tclosed_db\tsensitivity_db\tattempts\tflag\t")
	byFreq := map[float64]sweep.PointJSON{}
	for _, p := range in.sum.Points {
		byFreq[p.FreqHz] = p
	}
	for _, p := range derive(in.curve) {
		pj := byFreq[p.FreqHz]
		flag := ""
		if pj.Flagged {
			flag = "flagged"
			if pj.Flag != "" {
				flag += ": " + pj.Flag
			}
		}
		closed, sens := "-", "-" // a ratio H has no closed loop or sensitivity
		if in.sum.Measure != sweep.MeasureRatio {
			closed = fmt.Sprintf("%.2f", analysis.DBFromRatio(cmplx.Abs(p.T)))
			sens = fmt.Sprintf("%.2f", analysis.DBFromRatio(cmplx.Abs(p.S)))
		}
		fmt.Fprintf(tw, "%.5g\t%.3f\t%.2f\t%.3f\t%.2f\t%s\t%s\t%d\t%s\t\n", p.FreqHz,
			analysis.DBFromRatio(cmplx.Abs(p.L)), phaseOf(in.curve, p.FreqHz), pj.GainSigmaDB, pj.PhaseSigmaDeg,
			closed, sens, pj.Attempts, flag)
	}
	return tw.Flush()
}

// phaseOf returns the unwrapped phase of the curve point at f.
func phaseOf(curve []analysis.Point, f float64) float64 {
	for _, p := range curve {
		if p.FreqHz == f {
			return p.PhaseDeg
		}
	}
	return math.NaN()
}

func verdict(b *bool) string {
	switch {
	case b == nil:
		return "not judged (a margin is not reached in the band)"
	case *b:
		return "met"
	default:
		return "NOT MET"
	}
}

func shortVerdict(b *bool) string {
	if b == nil {
		return "n/a"
	}
	return verdict(b)
}

func writeComparison(w io.Writer, ins []*input, ds []derivedJSON, worst worstJSON, tg targets) error {
	fmt.Fprintln(w, "== comparison")
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "file\toperating point\tcrossover\tPM\tphase crossover\tGM\tmodulus margin\tMs\tovershoot\ttargets\t")
	for i, in := range ins {
		s := in.sum
		op := in.session.OperatingPoint
		if op == "" {
			op = "-"
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t\n", in.path, op,
			orNA(s.CrossoverHz, "%.4g Hz"), orNA(s.PhaseMarginDeg, "%.2f°"),
			orNA(s.PhaseCrossoverHz, "%.4g Hz"), orNA(s.GainMarginDB, "%.2f dB"),
			orNA(s.ModulusMargin, "%.3f"), orNA(ds[i].SensitivityPeak, "%.3f"),
			orNA(ds[i].OvershootPct, "%.1f %%"), shortVerdict(ds[i].MeetsTargets))
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	fmt.Fprintf(w, "worst phase margin: %s", orNA(worst.PhaseMarginDeg, "%.2f°"))
	if worst.PhaseMarginDeg != nil {
		fmt.Fprintf(w, " at %s (%s)", orNA(worst.CrossoverHz, "%.4g Hz"), worst.PhaseMarginFile)
	}
	fmt.Fprintf(w, "\nworst gain margin: %s", orNA(worst.GainMarginDB, "%.2f dB"))
	if worst.GainMarginDB != nil {
		fmt.Fprintf(w, " (%s)", worst.GainMarginFile)
	}
	fmt.Fprintf(w, "\nworst modulus margin: %s", orNA(worst.ModulusMargin, "%.3f"))
	if worst.ModulusMargin != nil {
		fmt.Fprintf(w, " (%s)", worst.ModulusFile)
	}
	_, err := fmt.Fprintf(w, "\nall files meet PM ≥ %g°, GM ≥ %g dB: %s\n", tg.pmMin, tg.gmMin, strings.ToLower(verdict(worst.MeetsTargets)))
	return err
}
