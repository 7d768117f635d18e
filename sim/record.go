package sim

import (
	"math"
	"math/cmplx"
	"math/rand/v2"
)

// bench is the shared physical state behind both instruments: the
// converter at one operating point and the generator's sine injected in
// series between the output node y and the feedback node x (x = y + v_z).
// Channel 1 probes x, channel 2 probes y. All times are seconds since
// the server started.
type bench struct {
	sc   *Scenario
	op   OperatingPoint
	loop rational
	// closed-loop settling pole: e(τ) = e0·e^(−σ·τ)·cos(ωd·τ)
	sigma, wd float64
	// T(0) of the closed loop, for the generator's DC offset
	t0 float64

	seg seg   // the generator's sine since its last change
	tr  trans // the settling transient that change started

	noise []float32 // unit-variance Gaussian samples, a power-of-two table
	rng   *rand.Rand
}

// seg is the generator's steady output since time start: v_z(t) =
// offset + amp·cos(phase + ω(t − start)) when on, the offset alone
// when off.
type seg struct {
	start  float64
	on     bool
	freqHz float64
	ampV   float64 // peak, V
	offV   float64
	phase  float64 // rad at start
	y      complex128
}

// trans is the output's deviation from the new steady state after a
// change at time at: Re{e0·e^((−σ+jωd)(t−at))}.
type trans struct {
	at float64
	e0 float64
}

const noiseTableBits = 20

func newBench(sc *Scenario, op OperatingPoint, seed int64) *bench {
	b := &bench{rng: rand.New(rand.NewPCG(uint64(seed), 0x5eed))}
	b.noise = make([]float32, 1<<noiseTableBits)
	for i := range b.noise {
		b.noise[i] = float32(b.rng.NormFloat64())
	}
	b.setPoint(sc, op, 0)
	return b
}

// setPoint changes the plant (scenario or load) at time t; the output
// settles from where it was.
func (b *bench) setPoint(sc *Scenario, op OperatingPoint, t float64) {
	yBefore := 0.0
	if b.sc != nil {
		yBefore = b.yAC(t)
	}
	b.sc, b.op = sc, op
	b.loop = sc.loop(op.LoadOhm)
	b.sigma, b.wd = settlingPole(b.loop)
	l0 := b.loop.eval(complex(0, 2*math.Pi*1e-3))
	b.t0 = real(l0 / (1 + l0))
	b.seg.y = b.phasor(b.seg)
	b.tr = trans{at: t, e0: yBefore - b.steady(b.seg, t)}
}

// phasor is the output's complex amplitude Y = −T(jω)·A for the sine
// of sg, T = L/(1+L) the closed loop from v_z to −y.
func (b *bench) phasor(sg seg) complex128 {
	if !sg.on || sg.freqHz <= 0 {
		return 0
	}
	l := b.loop.eval(complex(0, 2*math.Pi*sg.freqHz))
	return -l / (1 + l) * complex(sg.ampV, 0)
}

// steady is the output's steady AC part at time t for sg.
func (b *bench) steady(sg seg, t float64) float64 {
	if !sg.on {
		return 0
	}
	th := sg.phase + 2*math.Pi*sg.freqHz*(t-sg.start)
	return real(sg.y * cmplx.Exp(complex(0, th)))
}

func (b *bench) transient(t float64) float64 {
	tau := t - b.tr.at
	if tau < 0 || b.tr.e0 == 0 {
		return 0
	}
	return b.tr.e0 * b.sc.Meas.TransientGain * math.Exp(-b.sigma*tau) * math.Cos(b.wd*tau)
}

// yAC is the output's AC part (before the nonlinearity) at time t.
func (b *bench) yAC(t float64) float64 { return b.steady(b.seg, t) + b.transient(t) }

// setGenerator applies a change of the generator at time t. The phase is
// continuous; the output's deviation from the new steady state starts a
// transient that decays with the closed loop's settling pole.
func (b *bench) setGenerator(t float64, on bool, freqHz, ampV, offV float64) {
	old := b.seg
	if old.on == on && old.freqHz == freqHz && old.ampV == ampV && old.offV == offV {
		return
	}
	yBefore := b.yAC(t)
	ph := old.phase + 2*math.Pi*old.freqHz*(t-old.start)
	ph = math.Mod(ph, 2*math.Pi)
	b.seg = seg{start: t, on: on, freqHz: freqHz, ampV: ampV, offV: offV, phase: ph}
	b.seg.y = b.phasor(b.seg)
	b.tr = trans{at: t, e0: yBefore - b.steady(b.seg, t)}
}

// chanSetup is one digitizer channel's front end.
type chanSetup struct {
	rangeV  float64 // window offset ± range
	offsetV float64
	ac      bool
	bits    int // effective ADC bits for this record (8 for INT,8 data)
}

// lsb is the channel's volts per code.
func (c chanSetup) lsb() float64 { return c.rangeV / float64(int(1)<<(c.bits-1)) }

// record fills c1 (node x) and c2 (node y) with ADC codes for samples at
// t0 + n·dt. volts = code·lsb + offset, codes clipped to the signed
// range of the channel's bits.
//
// n1 and n2 are where the channels start reading the noise table (pick
// them with noiseOffsets). record only reads b, so it may run on a copy
// taken when the acquisition started.
func (b *bench) record(c1, c2 []int16, t0, dt float64, s1, s2 chanSetup, n1, n2 int) {
	sc := b.sc
	vout := sc.VoutV()
	sg := b.seg
	sat := sc.Meas.SaturationV
	// DC of each channel: the operating point, the generator's offset on
	// x, and its regulated effect on y.
	dcY := vout - sg.offV*b.t0
	dcX := dcY + sg.offV
	if s1.ac {
		dcX = 0
	}
	if s2.ac {
		dcY = 0
	}
	on := sg.on
	w := 2 * math.Pi * sg.freqHz
	wr := 2 * math.Pi * sc.SwitchingHz
	ripA := sc.Meas.RippleVpp / 2
	sigmaN := float32(sc.Meas.NoiseVrms)
	trE := b.tr.e0 * sc.Meas.TransientGain
	trDecay := cmplx.Exp(complex(-b.sigma*dt, b.wd*dt))
	rot := cmplx.Exp(complex(0, w*dt))
	rotR := cmplx.Exp(complex(0, wr*dt))

	lsb1, lsb2 := s1.lsb(), s2.lsb()
	inv1, inv2 := 1/lsb1, 1/lsb2
	hi1, hi2 := float64(int(1)<<(s1.bits-1)-1), float64(int(1)<<(s2.bits-1)-1)
	lo1, lo2 := -hi1-1, -hi2-1
	mask := len(b.noise) - 1
	noise := b.noise
	amp := sg.ampV
	if !on {
		amp = 0
	}
	const block = 1024
	for start := 0; start < len(c1); start += block {
		end := min(start+block, len(c1))
		t := t0 + float64(start)*dt
		// exact phasors at the block start; recursion inside the block
		th := sg.phase + w*(t-sg.start)
		zt := cmplx.Exp(complex(0, th))
		zy := sg.y * zt
		zr := cmplx.Exp(complex(0, wr*t))
		var ze complex128
		if tau := t - b.tr.at; tau >= 0 && trE != 0 {
			ze = complex(trE*math.Exp(-b.sigma*tau), 0) * cmplx.Exp(complex(0, b.wd*tau))
		}
		for i := start; i < end; i++ {
			u := real(zy) + real(ze)
			// soft limit with a small even term: Vs·tanh(u/Vs) + u²/(8·Vs),
			// tanh by its (3,2) rational approximation, exact at ±3
			x := u / sat
			var g float64
			switch {
			case x > 3:
				g = 1
			case x < -3:
				g = -1
			default:
				x2 := x * x
				g = x * (27 + x2) / (27 + 9*x2)
			}
			y := sat*g + u*u/(8*sat) + ripA*imag(zr)
			vx := dcX + y + amp*real(zt) + float64(sigmaN*noise[(n1+i)&mask])
			vy := dcY + y + float64(sigmaN*noise[(n2+i)&mask])
			q1 := math.RoundToEven((vx - s1.offsetV) * inv1)
			q2 := math.RoundToEven((vy - s2.offsetV) * inv2)
			c1[i] = int16(math.Max(lo1, math.Min(hi1, q1)))
			c2[i] = int16(math.Max(lo2, math.Min(hi2, q2)))
			zt *= rot
			zy *= rot
			zr *= rotR
			ze *= trDecay
		}
	}
}

// noiseOffsets picks the two channels' starting points in the noise table.
func (b *bench) noiseOffsets() (int, int) {
	return b.rng.IntN(len(b.noise)), b.rng.IntN(len(b.noise))
}
