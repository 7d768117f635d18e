package main

import (
	"bytes"
	"encoding/xml"
	"errors"
	"fmt"
	"image"
	"image/color"
	"image/png"
	"io"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"loopsweep/sweep"
)

func plotTo(t *testing.T, out string, extra ...string) {
	t.Helper()
	args := append([]string{"plot", sessionPath("bench-supply-heavy-load.json"), sessionPath("bench-supply-light-load.json"), "-o", out}, extra...)
	code, _, errs := runLoopsweep(args...)
	if code != 0 {
		t.Fatalf("plot: exit %d: %s", code, errs)
	}
}

// luminanceStats returns the mean and variance of the image's luminance
// (ITU-R BT.601 weights, as image/color's Gray conversion).
func luminanceStats(img image.Image) (mean, variance float64) {
	b := img.Bounds()
	n := 0.0
	var sum, sum2 float64
	for y := b.Min.Y; y < b.Max.Y; y++ {
		for x := b.Min.X; x < b.Max.X; x++ {
			g := float64(color.GrayModel.Convert(img.At(x, y)).(color.Gray).Y)
			sum += g
			sum2 += g * g
			n++
		}
	}
	mean = sum / n
	return mean, sum2/n - mean*mean
}

// countColor counts pixels within tol of c in every channel.
func countColor(img image.Image, c color.RGBA, tol int) int {
	b := img.Bounds()
	n := 0
	for y := b.Min.Y; y < b.Max.Y; y++ {
		for x := b.Min.X; x < b.Max.X; x++ {
			r, g, bl, _ := img.At(x, y).RGBA()
			d := func(v uint32, w uint8) bool { return math.Abs(float64(int(v>>8)-int(w))) <= float64(tol) }
			if d(r, c.R) && d(g, c.G) && d(bl, c.B) {
				n++
			}
		}
	}
	return n
}

func TestPlotPNG(t *testing.T) {
	for _, view := range []string{"loop", "closed", "sensitivity"} {
		t.Run(view, func(t *testing.T) {
			out := filepath.Join(t.TempDir(), "bode.png")
			plotTo(t, out, "--view", view)
			f, err := os.Open(out)
			if err != nil {
				t.Fatal(err)
			}
			defer f.Close()
			img, err := png.Decode(f)
			if err != nil {
				t.Fatalf("PNG does not decode: %v", err)
			}
			// 16 cm × 12 cm at 200 dpi: 16/2.54·200 = 1259.8 and
			// 12/2.54·200 = 944.9 pixels (arithmetic), within a pixel
			// of rounding.
			b := img.Bounds()
			if math.Abs(float64(b.Dx())-1259.8) > 1.5 || math.Abs(float64(b.Dy())-944.9) > 1.5 {
				t.Errorf("size %dx%d, want about 1260x945", b.Dx(), b.Dy())
			}
			// Not blank: a white page with dark axes and coloured
			// curves has a mean well below white and a clear spread.
			mean, v := luminanceStats(img)
			if mean > 254 || v < 100 {
				t.Errorf("looks blank: mean luminance %.1f, variance %.1f", mean, v)
			}
			// Both files' curves are drawn in their colours.
			for i := range 2 {
				c := curveColor(i).(color.RGBA)
				if n := countColor(img, c, 10); n < 500 {
					t.Errorf("curve %d colour %v: only %d pixels", i, c, n)
				}
			}
		})
	}
}

func TestPlotSVG(t *testing.T) {
	out := filepath.Join(t.TempDir(), "bode.svg")
	plotTo(t, out)
	data, err := os.ReadFile(out)
	if err != nil {
		t.Fatal(err)
	}
	dec := xml.NewDecoder(bytes.NewReader(data))
	var root string
	var texts strings.Builder
	for {
		tok, err := dec.Token()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			t.Fatalf("SVG does not parse: %v", err)
		}
		switch tk := tok.(type) {
		case xml.StartElement:
			if root == "" {
				root = tk.Name.Local
			}
		case xml.CharData:
			texts.Write(tk)
		}
	}
	if root != "svg" {
		t.Fatalf("root element %q, want svg", root)
	}
	// The annotations carry the margins of sweep.Summary.
	s, err := sweep.LoadSession(sessionPath("bench-supply-heavy-load.json"))
	if err != nil {
		t.Fatal(err)
	}
	sum, err := sweep.Summary(s)
	if err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{
		fmt.Sprintf("PM %.1f°", *sum.PhaseMarginDeg), fmt.Sprintf("GM %.1f dB", *sum.GainMarginDB),
		"bench supply, 12 V in, 5 V out, 3 A", "bench supply, 12 V in, 5 V out, 0.2 A", "frequency (Hz)",
	} {
		if !strings.Contains(texts.String(), want) {
			t.Errorf("SVG text lacks %q", want)
		}
	}
}

func TestPlotPDFAndCSVInput(t *testing.T) {
	out := filepath.Join(t.TempDir(), "bode.pdf")
	code, _, errs := runLoopsweep("plot", filepath.Join("..", "..", "testdata", "csv", "bench-supply-heavy-load.csv"), "-o", out)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	data, err := os.ReadFile(out)
	if err != nil {
		t.Fatal(err)
	}
	// ISO 32000-1 §7.5.2: a PDF file begins with "%PDF-" and ends with
	// "%%EOF" (memory).
	if !bytes.HasPrefix(data, []byte("%PDF-")) || !bytes.Contains(data[max(0, len(data)-32):], []byte("%%EOF")) {
		t.Errorf("not a PDF: %q…", data[:min(16, len(data))])
	}
}

// The output never overwrites an input, named directly, through another
// path, or through a hard link; bad flags and bad input exit 2 and leave
// no output.
func TestPlotBadInput(t *testing.T) {
	dir := t.TempDir()
	in := filepath.Join(dir, "s.json")
	data, err := os.ReadFile(sessionPath("bench-supply-light-load.json"))
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(in, data, 0o644); err != nil {
		t.Fatal(err)
	}
	link := filepath.Join(dir, "link.svg")
	if err := os.Link(in, link); err != nil {
		t.Fatal(err)
	}
	corrupt := filepath.Join(dir, "corrupt.json")
	if err := os.WriteFile(corrupt, data[:100], 0o644); err != nil {
		t.Fatal(err)
	}
	before := fileSum(t, in)
	out := filepath.Join(dir, "out.svg")
	cases := []struct {
		name string
		args []string
		want string
	}{
		{"output is input", []string{in, "-o", in}, "is an input"},
		{"output is input by another path", []string{in, "-o", filepath.Join(dir, ".", "sub", "..", "s.json")}, "is an input"},
		{"output is a hard link to input", []string{in, "-o", link}, "same file"},
		{"unknown format", []string{in, "-o", filepath.Join(dir, "x.jpg")}, "unknown format"},
		{"no output", []string{in}, "-o"},
		{"bad view", []string{in, "-o", out, "--view", "nyquist"}, "--view"},
		{"bad size", []string{in, "-o", out, "--width", "0"}, "--width"},
		{"corrupt input", []string{corrupt, "-o", out}, "corrupt.json"},
		{"no files", []string{"-o", out}, "no FILE"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			code, _, errs := runLoopsweep(append([]string{"plot"}, c.args...)...)
			if code != 2 {
				t.Errorf("exit %d, want 2 (%s)", code, errs)
			}
			if !strings.Contains(errs, c.want) {
				t.Errorf("stderr %q does not say %q", errs, c.want)
			}
			if _, err := os.Stat(out); err == nil {
				t.Errorf("%s was written", out)
			}
		})
	}
	if fileSum(t, in) != before {
		t.Error("input changed")
	}
}
