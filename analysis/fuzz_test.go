package analysis

import (
	"encoding/binary"
	"math"
	"testing"
)

// samplesFrom turns fuzz bytes into samples: int16 values scaled to ±1 V,
// with a few byte patterns mapped to NaN, ±Inf and huge values so that
// bad samples are reached.
func samplesFrom(data []byte) []float64 {
	x := make([]float64, 0, len(data)/2)
	for i := 0; i+1 < len(data); i += 2 {
		v := int16(binary.LittleEndian.Uint16(data[i:]))
		switch v {
		case math.MaxInt16:
			x = append(x, math.NaN())
		case math.MinInt16:
			x = append(x, math.Inf(-1))
		case math.MaxInt16 - 1:
			x = append(x, 1e300)
		default:
			x = append(x, float64(v)/math.MaxInt16)
		}
	}
	return x
}

func FuzzEstimateTone(f *testing.F) {
	f.Add([]byte{0, 0, 255, 127, 0, 128, 1, 2, 3, 4}, 1e-3, 100.0, uint8(0), 0.5)
	f.Fuzz(func(t *testing.T, data []byte, dt, freq float64, win uint8, clip float64) {
		x := samplesFrom(data)
		opt := ToneOptions{Window: Window(win % 3), ClipLow: -clip, ClipHigh: clip, SkipHarmonics: win&4 != 0}
		tone, err := EstimateTone(x, dt, freq, opt)
		if err != nil {
			return
		}
		if tone.N < 1 || tone.N > len(x) || tone.Cycles < 1-spanTolCycles {
			t.Fatalf("span %d of %d samples, %g cycles", tone.N, len(x), tone.Cycles)
		}
		for name, v := range map[string]float64{"amp": tone.AmpPeak, "phase": tone.PhaseRad, "dc": tone.DC, "noise": tone.NoiseRMS, "snr": tone.SNRdB, "h2": tone.H2dBc, "h3": tone.H3dBc} {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				t.Fatalf("%s is %g: %+v", name, v, tone)
			}
		}
		if tone.AmpPeak < 0 || tone.NoiseRMS < 0 || tone.PhaseRad <= -math.Pi || tone.PhaseRad > math.Pi ||
			math.Abs(tone.SNRdB) > SNRCapDB || tone.H2dBc < HarmonicFloorDBc || tone.H3dBc < HarmonicFloorDBc {
			t.Fatalf("out of range: %+v", tone)
		}
		// samples are within ±1 V, so no fit can exceed a few volts
		if tone.AmpPeak > 1e3 || math.Abs(tone.DC) > 1e3 {
			t.Fatalf("implausible fit of samples within ±1 V: %+v", tone)
		}
		// the pair path must agree with the single-channel path
		a, b, err := EstimatePair(x, x, dt, freq, opt, opt)
		if err != nil || a.Phasor != tone.Phasor || b.Phasor != tone.Phasor {
			t.Fatalf("pair differs: %v %v %v (%v)", a.Phasor, b.Phasor, tone.Phasor, err)
		}
	})
}

// pointsFrom decodes points from fuzz bytes, 6 bytes a point: frequency
// step (uint8, 0 makes a duplicate), gain (int16, 0.01 dB), phase (int16,
// 0.1°), sigma (uint8). A step of 255 gives a NaN gain.
func pointsFrom(data []byte) []Point {
	var pts []Point
	f := 1.0
	for i := 0; i+5 < len(data); i += 6 {
		step := data[i]
		f *= 1 + float64(step)/100
		g := float64(int16(binary.LittleEndian.Uint16(data[i+1:]))) / 100
		if step == 255 {
			g = math.NaN()
		}
		p := float64(int16(binary.LittleEndian.Uint16(data[i+3:]))) / 10
		s := float64(data[i+5]) / 50
		pts = append(pts, Point{FreqHz: f, GainDB: g, PhaseDeg: p, GainSigmaDB: s, PhaseSigmaDeg: 10 * s})
	}
	return pts
}

func FuzzComputeMargins(f *testing.F) {
	f.Add([]byte{10, 0xe8, 0x03, 0x7c, 0xfc, 5, 10, 0x18, 0xfc, 0x52, 0xf8, 5})
	f.Fuzz(func(t *testing.T, data []byte) {
		pts := pointsFrom(data)
		m, err := ComputeMargins(pts)
		if err != nil {
			return
		}
		lo, hi := pts[0].FreqHz, pts[len(pts)-1].FreqHz
		inBand := func(fr float64) bool { return fr >= lo*(1-1e-12) && fr <= hi*(1+1e-12) }
		for _, c := range m.GainCrossovers {
			if !inBand(c.FreqHz) || c.PhaseMarginDeg <= -180 || c.PhaseMarginDeg > 180 ||
				!(c.SigmaDeg >= 0) || !(c.SigmaFreqHz >= 0) || c.DelayMarginS < 0 || math.IsNaN(c.DelayMarginS) {
				t.Fatalf("bad gain crossover %+v in [%g, %g]", c, lo, hi)
			}
		}
		for _, c := range m.PhaseCrossovers {
			if !inBand(c.FreqHz) || math.IsNaN(c.GainMarginDB) || math.IsInf(c.GainMarginDB, 0) || !(c.SigmaDB >= 0) || !(c.SigmaFreqHz >= 0) {
				t.Fatalf("bad phase crossover %+v", c)
			}
		}
		if (len(m.GainCrossovers) == 0) != (m.WorstPM == -1) || m.WorstPM >= len(m.GainCrossovers) ||
			(len(m.PhaseCrossovers) == 0) != (m.WorstGM == -1) || m.WorstGM >= len(m.PhaseCrossovers) {
			t.Fatalf("worst indices %d %d for %d, %d crossings", m.WorstPM, m.WorstGM, len(m.GainCrossovers), len(m.PhaseCrossovers))
		}
		if len(m.GainCrossovers) > 0 && m.GainReach != Reached || m.GainReach > NotFound || m.PhaseReach > NotFound {
			t.Fatalf("reach %d %d", m.GainReach, m.PhaseReach)
		}
		if !(m.ModulusMargin >= 0) || math.IsInf(m.ModulusMargin, 0) || !inBand(m.ModulusFreqHz) ||
			!(m.ModulusSigma >= 0) || math.IsInf(m.ModulusSigma, 0) {
			t.Fatalf("modulus margin %g ± %g at %g Hz", m.ModulusMargin, m.ModulusSigma, m.ModulusFreqHz)
		}
	})
}
