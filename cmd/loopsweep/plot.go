package main

import (
	"fmt"
	"image/color"
	"io"
	"math"
	"math/cmplx"
	"os"
	"path/filepath"
	"strings"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"
	"gonum.org/v1/plot/vg/vgpdf"
	"gonum.org/v1/plot/vg/vgsvg"

	"loopsweep/analysis"
	"loopsweep/sweep"
)

func init() {
	register(&command{
		name:    "plot",
		summary: "Bode plot of saved sessions or loop-gain CSV files to SVG, PNG or PDF",
		usage: `loopsweep plot FILE... -o OUT.svg|OUT.png|OUT.pdf [--view loop|closed|sensitivity] [--width CM --height CM]

Draws gain (dB) and phase (degrees) against log frequency in two stacked
panels, one curve per FILE (sessions or loop-gain CSV, as for 'analyze')
with a legend, and marks each file's worst crossover with its phase margin
and its phase crossover with its gain margin. --view closed draws the
closed loop T = L/(1+L); --view sensitivity draws S = 1/(1+L) with its
peak Ms. The format follows OUT's extension. OUT is never one of the
inputs; it is written to a temporary file and renamed into place.`,
		run: runPlot,
	})
}

// plotView selects what is drawn.
type plotView string

const (
	viewLoop        plotView = "loop"
	viewClosed      plotView = "closed"
	viewSensitivity plotView = "sensitivity"
)

// Report-ready default size: 16 cm × 12 cm fits a single-column page.
const (
	defaultPlotWidthCM  = 16.0
	defaultPlotHeightCM = 12.0
	pngDPI              = 200
)

func runPlot(args []string, stdout, stderr io.Writer) error {
	c := commands["plot"]
	fs := newFlagSet(c, stderr)
	out := fs.String("o", "", "output file; .svg, .png or .pdf")
	view := fs.String("view", string(viewLoop), "what to draw: loop (L), closed (L/(1+L)) or sensitivity (1/(1+L))")
	wcm := fs.Float64("width", defaultPlotWidthCM, "width, cm")
	hcm := fs.Float64("height", defaultPlotHeightCM, "height, cm")
	files, err := parseFlagsAndFiles(fs, args)
	if err != nil {
		return err
	}
	if len(files) == 0 {
		return badInput("no FILE given (a session .json or a loop-gain .csv)")
	}
	if *out == "" {
		return badInput("-o: give the output file (.svg, .png or .pdf)")
	}
	if err := notAnInput(*out, files); err != nil {
		return err
	}
	format := strings.ToLower(strings.TrimPrefix(filepath.Ext(*out), "."))
	switch format {
	case "svg", "png", "pdf":
	default:
		return badInput("-o %s: unknown format %q (want .svg, .png or .pdf)", *out, filepath.Ext(*out))
	}
	v := plotView(*view)
	switch v {
	case viewLoop, viewClosed, viewSensitivity:
	default:
		return badInput("--view %q: want loop, closed or sensitivity", *view)
	}
	for _, f := range []struct {
		name string
		v    float64
	}{{"--width", *wcm}, {"--height", *hcm}} {
		if !(f.v >= 2 && f.v <= 200) {
			return badInput("%s %v cm: want 2 to 200 cm", f.name, f.v)
		}
	}
	var ins []*input
	for _, f := range files {
		in, err := loadInput(f)
		if err != nil {
			return err
		}
		if len(in.curve) < 2 {
			return badInput("%s: %d measured points; a curve needs at least 2", f, len(in.curve))
		}
		ins = append(ins, in)
	}
	for _, in := range ins {
		if v != viewLoop && in.sum.Measure == sweep.MeasureRatio {
			return badInput("--view %s needs loop-gain data; %s measured a ratio H = V2/V1", v, in.path)
		}
	}
	w, h := vg.Length(*wcm)*vg.Centimeter, vg.Length(*hcm)*vg.Centimeter
	wt, err := renderBode(ins, v, w, h, format)
	if err != nil {
		return err
	}
	return writeFileAtomic(*out, wt)
}

// notAnInput refuses an output path that names one of the inputs (by
// path or, when it exists, by identity), so an input is never overwritten.
func notAnInput(out string, files []string) error {
	ao, _ := filepath.Abs(out)
	so, serr := os.Stat(out)
	for _, f := range files {
		af, _ := filepath.Abs(f)
		if af == ao {
			return badInput("-o %s is an input file; choose another name", out)
		}
		if serr == nil {
			if sf, err := os.Stat(f); err == nil && os.SameFile(so, sf) {
				return badInput("-o %s is the same file as input %s; choose another name", out, f)
			}
		}
	}
	return nil
}

// writeFileAtomic writes wt to a temporary file beside path and renames
// it into place, so a failed render leaves no partial file.
func writeFileAtomic(path string, wt io.WriterTo) error {
	tmp, err := os.CreateTemp(filepath.Dir(path), "."+filepath.Base(path)+".tmp-*")
	if err != nil {
		return fmt.Errorf("write plot %s: %w", path, err)
	}
	name := tmp.Name()
	if err := tmp.Chmod(0o644); err != nil {
		tmp.Close()
		os.Remove(name)
		return fmt.Errorf("write plot %s: %w", path, err)
	}
	if _, err := wt.WriteTo(tmp); err != nil {
		tmp.Close()
		os.Remove(name)
		return fmt.Errorf("write plot %s: %w", path, err)
	}
	if err := tmp.Close(); err != nil {
		os.Remove(name)
		return fmt.Errorf("write plot %s: %w", path, err)
	}
	if err := os.Rename(name, path); err != nil {
		os.Remove(name)
		return fmt.Errorf("write plot %s: %w", path, err)
	}
	return nil
}

// curveColor gives each file its own colour; the palette is a common
// colour-blind-safe set (Okabe–Ito, common practice).
func curveColor(i int) color.Color {
	p := []color.RGBA{
		{0, 114, 178, 255}, {213, 94, 0, 255}, {0, 158, 115, 255}, {204, 121, 167, 255},
		{230, 159, 0, 255}, {86, 180, 233, 255}, {0, 0, 0, 255},
	}
	return p[i%len(p)]
}

// vline draws a vertical line at X across the whole data area with a
// label near the top (Row counts label rows down from the top, so
// several files' labels do not overlap).
type vline struct {
	X     float64
	Style draw.LineStyle
	Label string
	Row   int
}

func (l vline) Plot(c draw.Canvas, p *plot.Plot) {
	trX, _ := p.Transforms(&c)
	x := trX(l.X)
	c.StrokeLine2(l.Style, x, c.Min.Y, x, c.Max.Y)
	if l.Label != "" {
		sty := p.Legend.TextStyle
		sty.Color = l.Style.Color
		sty.Font.Size = vg.Points(7)
		sty.XAlign = draw.XLeft
		sty.YAlign = draw.YTop
		y := c.Max.Y - vg.Points(2) - vg.Length(l.Row)*vg.Points(9)
		tx := x + vg.Points(2)
		if tx+sty.Width(l.Label) > c.Max.X {
			// No room on the right: put the label left of the line.
			sty.XAlign = draw.XRight
			tx = x - vg.Points(2)
		}
		c.FillText(sty, vg.Point{X: tx, Y: y}, l.Label)
	}
}

// hline draws a horizontal reference line at Y across the data area.
type hline struct {
	Y     float64
	Style draw.LineStyle
}

func (l hline) Plot(c draw.Canvas, p *plot.Plot) {
	_, trY := p.Transforms(&c)
	y := trY(l.Y)
	c.StrokeLine2(l.Style, c.Min.X, y, c.Max.X, y)
}

// DataRange lets the reference lines take no part in autoscaling while
// keeping their value inside the range.
func (l hline) DataRange() (xmin, xmax, ymin, ymax float64) {
	return math.Inf(1), math.Inf(-1), l.Y, l.Y
}

func (l vline) DataRange() (xmin, xmax, ymin, ymax float64) {
	return l.X, l.X, math.Inf(1), math.Inf(-1)
}

func hzLabel(f float64) string {
	switch {
	case f >= 1e6:
		return fmt.Sprintf("%.3g MHz", f/1e6)
	case f >= 1e3:
		return fmt.Sprintf("%.3g kHz", f/1e3)
	}
	return fmt.Sprintf("%.3g Hz", f)
}

// renderBode draws the two stacked panels and returns the encoded file.
func renderBode(ins []*input, v plotView, w, h vg.Length, format string) (io.WriterTo, error) {
	gain, phase := plot.New(), plot.New()
	switch v {
	case viewLoop:
		gain.Title.Text = "Loop gain L"
		for _, in := range ins {
			if in.sum.Measure == sweep.MeasureRatio {
				gain.Title.Text = "Response (loop gain L, transfer function H = V2/V1)"
				if len(ins) == 1 {
					gain.Title.Text = "Transfer function H = V2/V1"
				}
				break
			}
		}
	case viewClosed:
		gain.Title.Text = "Closed loop T = L/(1+L)"
	case viewSensitivity:
		gain.Title.Text = "Sensitivity S = 1/(1+L)"
	}
	gain.Y.Label.Text = "gain (dB)"
	phase.Y.Label.Text = "phase (°)"
	phase.X.Label.Text = "frequency (Hz)"
	for _, p := range []*plot.Plot{gain, phase} {
		p.X.Scale = plot.LogScale{}
		p.X.Tick.Marker = siLogTicks{}
		p.Add(plotter.NewGrid())
	}
	// The legend goes where the curves usually are not: bottom left for
	// L and T (high gain, or 0 dB, at low frequency), top left for S.
	gain.Legend.Top = v == viewSensitivity
	gain.Legend.Left = true
	gain.Legend.TextStyle.Font.Size = vg.Points(8)
	ref := draw.LineStyle{Color: color.Gray{Y: 90}, Width: vg.Points(0.8)}
	switch v {
	case viewLoop:
		gain.Add(hline{0, ref})
		phase.Add(hline{-180, ref})
	case viewClosed:
		gain.Add(hline{-3, ref})
	case viewSensitivity:
		gain.Add(hline{0, ref})
	}
	for i, in := range ins {
		col := curveColor(i)
		sty := draw.LineStyle{Color: col, Width: vg.Points(1.2)}
		dp := derive(in.curve)
		gxy := make(plotter.XYs, len(dp))
		pxy := make(plotter.XYs, len(dp))
		for k, p := range dp {
			var z complex128
			ph := in.curve[k].PhaseDeg // unwrapped loop phase
			switch v {
			case viewLoop:
				z = p.L
			case viewClosed:
				z = p.T
				ph = cmplx.Phase(p.T) * 180 / math.Pi
			case viewSensitivity:
				z = p.S
				ph = cmplx.Phase(p.S) * 180 / math.Pi
			}
			gxy[k] = plotter.XY{X: p.FreqHz, Y: analysis.DBFromRatio(cmplx.Abs(z))}
			pxy[k] = plotter.XY{X: p.FreqHz, Y: ph}
		}
		if v != viewLoop {
			un := analysis.UnwrapDeg(phases(pxy))
			for k := range pxy {
				pxy[k].Y = un[k]
			}
		}
		gl, err := plotter.NewLine(gxy)
		if err != nil {
			return nil, fmt.Errorf("plot %s: %w", in.path, err)
		}
		gl.LineStyle = sty
		pl, err := plotter.NewLine(pxy)
		if err != nil {
			return nil, fmt.Errorf("plot %s: %w", in.path, err)
		}
		pl.LineStyle = sty
		gain.Add(gl)
		phase.Add(pl)
		// Measured points as dots; flagged points as crosses, so a
		// reader sees where the data is and which points stayed bad.
		var good, bad plotter.XYs
		for k, p := range in.curve {
			if flaggedAt(in, p.FreqHz) {
				bad = append(bad, gxy[k])
			} else {
				good = append(good, gxy[k])
			}
		}
		for _, set := range []struct {
			xy    plotter.XYs
			shape draw.GlyphDrawer
			r     vg.Length
		}{{good, draw.CircleGlyph{}, vg.Points(1.3)}, {bad, draw.CrossGlyph{}, vg.Points(3)}} {
			if len(set.xy) == 0 {
				continue
			}
			sc, err := plotter.NewScatter(set.xy)
			if err != nil {
				return nil, fmt.Errorf("plot %s: %w", in.path, err)
			}
			sc.GlyphStyle = draw.GlyphStyle{Color: col, Radius: set.r, Shape: set.shape}
			gain.Add(sc)
		}
		gain.Legend.Add(in.label, gl)
		mark := draw.LineStyle{Color: col, Width: vg.Points(0.8), Dashes: []vg.Length{vg.Points(3), vg.Points(2)}}
		s := in.sum
		switch v {
		case viewLoop:
			if s.CrossoverHz != nil && s.PhaseMarginDeg != nil {
				gain.Add(vline{*s.CrossoverHz, mark, fmt.Sprintf("fc %s", hzLabel(*s.CrossoverHz)), 2 * i})
				phase.Add(vline{*s.CrossoverHz, mark, fmt.Sprintf("PM %.1f°", *s.PhaseMarginDeg), 2 * i})
			}
			if s.PhaseCrossoverHz != nil && s.GainMarginDB != nil {
				gain.Add(vline{*s.PhaseCrossoverHz, mark, fmt.Sprintf("GM %.1f dB", *s.GainMarginDB), 2*i + 1})
				phase.Add(vline{*s.PhaseCrossoverHz, mark, fmt.Sprintf("f180 %s", hzLabel(*s.PhaseCrossoverHz)), 2*i + 1})
			}
		case viewSensitivity:
			if s.ModulusMargin != nil && *s.ModulusMargin > 0 && s.ModulusFreqHz != nil {
				ms := 1 / *s.ModulusMargin
				gain.Add(vline{*s.ModulusFreqHz, mark, fmt.Sprintf("Ms %.2f (%.1f dB)", ms, analysis.DBFromRatio(ms)), i})
			}
		case viewClosed:
			d := derivedOf(in, targets{})
			if d.ClosedLoopBandwidthHz != nil {
				gain.Add(vline{*d.ClosedLoopBandwidthHz, mark, fmt.Sprintf("-3 dB %s", hzLabel(*d.ClosedLoopBandwidthHz)), i})
			}
		}
	}
	// Both panels share the frequency range.
	phase.X.Min, phase.X.Max = math.Min(gain.X.Min, phase.X.Min), math.Max(gain.X.Max, phase.X.Max)
	gain.X.Min, gain.X.Max = phase.X.Min, phase.X.Max
	if !(gain.X.Min > 0) {
		return nil, fmt.Errorf("plot: frequency range %g..%g Hz is not positive", gain.X.Min, gain.X.Max)
	}

	var cv interface {
		vg.CanvasSizer
		io.WriterTo
	}
	switch format {
	case "svg":
		cv = vgsvg.New(w, h)
	case "pdf":
		cv = vgpdf.New(w, h)
	default:
		cv = vgimg.PngCanvas{Canvas: vgimg.NewWith(vgimg.UseWH(w, h), vgimg.UseDPI(pngDPI), vgimg.UseBackgroundColor(color.White))}
	}
	dc := draw.New(cv)
	tiles := draw.Tiles{Rows: 2, Cols: 1, PadTop: vg.Millimeter * 2, PadBottom: vg.Millimeter * 2,
		PadLeft: vg.Millimeter * 2, PadRight: vg.Millimeter * 4, PadY: vg.Millimeter * 2}
	grid := [][]*plot.Plot{{gain}, {phase}}
	cs := plot.Align(grid, tiles, dc)
	gain.Draw(cs[0][0])
	phase.Draw(cs[1][0])
	return cv, nil
}

func phases(xy plotter.XYs) []float64 {
	out := make([]float64, len(xy))
	for i, p := range xy {
		out[i] = p.Y
	}
	return out
}

// siLogTicks are plot.LogTicks labelled with SI prefixes (10, 100, 1k, 10k).
type siLogTicks struct{}

func (siLogTicks) Ticks(min, max float64) []plot.Tick {
	ts := plot.LogTicks{Prec: -1}.Ticks(min, max)
	for i, t := range ts {
		if t.Label == "" {
			continue
		}
		switch v := t.Value; {
		case v >= 1e6:
			ts[i].Label = fmt.Sprintf("%gM", v/1e6)
		case v >= 1e3:
			ts[i].Label = fmt.Sprintf("%gk", v/1e3)
		default:
			ts[i].Label = fmt.Sprintf("%g", v)
		}
	}
	return ts
}

// flaggedAt reports whether the point of in measured at f is flagged.
func flaggedAt(in *input, f float64) bool {
	for _, p := range in.sum.Points {
		if p.FreqHz == f {
			return p.Flagged
		}
	}
	return false
}
