package analysis

// Placeholder bodies so that other packages compile while the analysis
// owner writes the real ones; the owner deletes this file.

import "errors"

var errUnimplemented = errors.New("analysis: not implemented yet")

// EstimateTone estimates the tone at f Hz in x sampled every dt seconds.
func EstimateTone(x []float64, dt, f float64, opt ToneOptions) (Tone, error) {
	return Tone{}, errUnimplemented
}

// EstimatePair estimates the tone at f Hz on both channels in one pass.
func EstimatePair(x1, x2 []float64, dt, f float64, o1, o2 ToneOptions) (Tone, Tone, error) {
	return Tone{}, Tone{}, errUnimplemented
}

// WholeCycleSpan returns the largest m ≤ n such that m samples at dt hold
// a whole number of cycles of f (within rounding).
func WholeCycleSpan(n int, dt, f float64) (int, error) { return 0, errUnimplemented }

// LoopGain returns L = −ret/inj (voltage injection, control convention).
func LoopGain(inj, ret Tone) Response { return Response{} }

// Ratio returns H = out/in.
func Ratio(in, out Tone) Response { return Response{} }

// UnwrapDeg returns a continuous copy of phases in degrees.
func UnwrapDeg(phases []float64) []float64 { return nil }

// ComputeMargins finds every crossover in a sorted sweep.
func ComputeMargins(pts []Point) (Margins, error) { return Margins{}, errUnimplemented }
