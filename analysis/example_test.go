package analysis_test

import (
	"fmt"
	"math"
	"math/cmplx"

	"loopsweep/analysis"
)

func ExampleEstimateTone() {
	// 0.5 V peak at 30°, 1 kHz, on a 0.2 V offset, sampled at 1 MHz.
	const dt, f = 1e-6, 1000.0
	x := make([]float64, 10500) // 10.5 cycles: Rect uses the first 10
	for i := range x {
		x[i] = 0.2 + 0.5*math.Cos(2*math.Pi*f*float64(i)*dt+math.Pi/6)
	}
	t, err := analysis.EstimateTone(x, dt, f, analysis.ToneOptions{})
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("%.4f V at %.2f°, DC %.3f V, %d samples, %.0f cycles\n",
		t.AmpPeak, t.PhaseRad*180/math.Pi, t.DC, t.N, t.Cycles)
	// Output: 0.5000 V at 30.00°, DC 0.200 V, 10000 samples, 10 cycles
}

func ExampleLoopGain() {
	// Injection side 1 V at 0°, return side 0.5 V at 45°:
	// L = −0.5∠45° = 0.5∠−135°, so at |L| = 1 this phase would mean PM 45°.
	inj := analysis.Tone{FreqHz: 2000, Phasor: 1, SNRdB: 80}
	ret := analysis.Tone{FreqHz: 2000, Phasor: cmplx.Rect(0.5, math.Pi/4), SNRdB: 80}
	l := analysis.LoopGain(inj, ret)
	fmt.Printf("%.2f dB %.1f° ±%.4f°\n", l.GainDB, l.PhaseDeg, l.PhaseSigmaDeg)
	// Output: -6.02 dB -135.0° ±0.0081°
}

func ExampleComputeMargins() {
	// L(s) = 4/(s+1)³ sampled at 10 points per decade (ω in rad/s as Hz
	// scaled by 2π). Closed form: GM = 20·log10(8/4) = 6.02 dB at √3 rad/s,
	// ωc = sqrt(4^(2/3) − 1), PM = 180° − 3·atan(ωc); Ms = 3 by a dense scan.
	var pts []analysis.Point
	for u := -3.0; u <= 1.0; u += 0.1 {
		f := math.Pow(10, u)
		l := 4 / cmplx.Pow(complex(1, 2*math.Pi*f), 3)
		pts = append(pts, analysis.Point{FreqHz: f, GainDB: analysis.DBFromRatio(cmplx.Abs(l)), PhaseDeg: cmplx.Phase(l) * 180 / math.Pi})
	}
	m, err := analysis.ComputeMargins(pts)
	if err != nil {
		fmt.Println(err)
		return
	}
	gc, pc := m.GainCrossovers[m.WorstPM], m.PhaseCrossovers[m.WorstGM]
	fmt.Printf("PM %.2f° at %.4f Hz, GM %.2f dB at %.4f Hz, Ms %.2f\n",
		gc.PhaseMarginDeg, gc.FreqHz, pc.GainMarginDB, pc.FreqHz, 1/m.ModulusMargin)
	// Output: PM 27.14° at 0.1962 Hz, GM 6.02 dB at 0.2757 Hz, Ms 3.00
}

func ExampleOvershootFromPM() {
	os, _ := analysis.OvershootFromPM(51.83) // ζ = 0.5
	fmt.Printf("%.1f %%\n", 100*os)
	// Output: 16.3 %
}

func ExampleUnwrapDeg() {
	fmt.Println(analysis.UnwrapDeg([]float64{-150, 170, 100, -20}))
	// Output: [-150 -190 -260 -380]
}
