package sim

import (
	"math"
	"math/cmplx"
	"math/rand/v2"
	"runtime"
	"sync"
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
// change at time at: Re{e0·e^((−σ+jωd)(t−at))}, with e0 chosen so that
// the output and its slope are continuous at the change (only the
// output for a real pole).
type trans struct {
	at float64
	e0 complex128
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
	var y0, d0 float64
	if b.sc != nil {
		y0, d0 = b.yAC(t), b.slope(t)
	}
	b.sc, b.op = sc, op
	b.loop = sc.loop(op.LoadOhm)
	b.sigma, b.wd = settlingPole(b.loop)
	l0 := b.loop.eval(complex(0, 2*math.Pi*1e-3))
	b.t0 = real(l0 / (1 + l0))
	b.seg.y = b.phasor(b.seg)
	b.startTransient(t, y0, d0)
}

// startTransient sets the transient so that the output (y0) and its
// slope (d0, V/s) just before the change at t carry on, within a bound
// of twice the larger steady amplitude so a light damping cannot make
// it absurd.
func (b *bench) startTransient(t, y0, d0 float64) {
	a := y0 - b.steady(b.seg, t)
	var c float64
	if b.wd > 0 {
		c = -((d0 - b.steadySlope(b.seg, t)) + b.sigma*a) / b.wd
	}
	e := complex(a, c)
	if lim := 2 * (cmplx.Abs(b.seg.y) + math.Abs(y0)); cmplx.Abs(e) > lim && cmplx.Abs(e) > 0 {
		e *= complex(lim/cmplx.Abs(e), 0)
	}
	b.tr = trans{at: t, e0: e}
}

// steadySlope is d/dt of steady, V/s.
func (b *bench) steadySlope(sg seg, t float64) float64 {
	if !sg.on {
		return 0
	}
	w := 2 * math.Pi * sg.freqHz
	th := sg.phase + w*(t-sg.start)
	return real(complex(0, w) * sg.y * cmplx.Exp(complex(0, th)))
}

// slope is d/dt of yAC, V/s.
func (b *bench) slope(t float64) float64 {
	d := b.steadySlope(b.seg, t)
	if tau := t - b.tr.at; tau >= 0 && b.tr.e0 != 0 {
		p := complex(-b.sigma, b.wd)
		d += real(b.tr.e0*p*cmplx.Exp(p*complex(tau, 0))) * b.sc.Meas.TransientGain
	}
	return d
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
	p := complex(-b.sigma, b.wd)
	return real(b.tr.e0*cmplx.Exp(p*complex(tau, 0))) * b.sc.Meas.TransientGain
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
	y0, d0 := b.yAC(t), b.slope(t)
	ph := old.phase + 2*math.Pi*old.freqHz*(t-old.start)
	ph = math.Mod(ph, 2*math.Pi)
	b.seg = seg{start: t, on: on, freqHz: freqHz, ampV: ampV, offV: offV, phase: ph}
	b.seg.y = b.phasor(b.seg)
	b.startTransient(t, y0, d0)
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
//
// Long records are generated in parallel pieces (every block of 1024
// samples restarts from exact phasors, so the pieces are independent).
func (b *bench) record(c1, c2 []int16, t0, dt float64, s1, s2 chanSetup, n1, n2 int) {
	const minPiece = 1 << 16
	workers := min(runtime.GOMAXPROCS(0), len(c1)/minPiece)
	if workers < 2 {
		b.recordPiece(c1, c2, 0, t0, dt, s1, s2, n1, n2)
		return
	}
	per := (len(c1)/workers + 1023) &^ 1023
	var wg sync.WaitGroup
	for lo := 0; lo < len(c1); lo += per {
		hi := min(lo+per, len(c1))
		wg.Add(1)
		go func() {
			defer wg.Done()
			b.recordPiece(c1[lo:hi], c2[lo:hi], lo, t0, dt, s1, s2, n1, n2)
		}()
	}
	wg.Wait()
}

// recordPiece fills samples first.. of the record into c1 and c2.
func (b *bench) recordPiece(c1, c2 []int16, first int, t0, dt float64, s1, s2 chanSetup, n1, n2 int) {
	n1, n2 = n1+first, n2+first
	t0 += float64(first) * dt
	sc := b.sc
	vout := sc.VoutV()
	sg := b.seg
	sat := sc.Meas.SaturationV
	// DC of each channel: the operating point, the generator's offset on
	// x, and its regulated effect on y.
	off := sg.offV
	if !sg.on {
		off = 0 // the generator's output relay disconnects its offset too
	}
	dcY := vout - off*b.t0
	dcX := dcY + off
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
	sigmaN := sc.Meas.NoiseVrms
	trE := b.tr.e0 * complex(sc.Meas.TransientGain, 0)
	trDecay := cmplx.Exp(complex(-b.sigma*dt, b.wd*dt))

	const block = 1024 // the noise table's length is a multiple
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
	// The soft limit acts inside the loop (the power stage's swing), so
	// the loop corrects its deviation: y = u + |S|·(g(u) − u) with
	// S = 1/(1+L) at the tone (the harmonics are scaled alike).
	ks := 1.0
	if on && sg.freqHz > 0 {
		l := b.loop.eval(complex(0, w))
		ks = 1 / cmplx.Abs(1+l)
	}
	invSat, sq, k3 := 1/sat, ks/(8*sat), ks/(3*sat*sat)
	base1, base2 := (dcX-s1.offsetV)*inv1, (dcY-s2.offsetV)*inv2
	sn1, sn2 := float64(sigmaN)*inv1, float64(sigmaN)*inv2
	n1, n2 = n1&^(block-1), n2&^(block-1)
	var ybuf, vbuf [block]float64
	// e^(jω·k·dt) and e^(jωr·k·dt) for k in one block, exact
	var tabT, tabR [block]complex128
	for k := range min(block, len(c1)) {
		tabT[k] = cmplx.Exp(complex(0, w*dt*float64(k)))
		tabR[k] = cmplx.Exp(complex(0, wr*dt*float64(k)))
	}
	for start := 0; start < len(c1); start += block {
		end := min(start+block, len(c1))
		t := t0 + float64(start)*dt
		// exact phasors at the block start
		th := sg.phase + w*(t-sg.start)
		zt := cmplx.Exp(complex(0, th))
		zr := cmplx.Exp(complex(0, wr*t))
		var ze complex128
		if tau := t - b.tr.at; tau >= 0 && trE != 0 {
			ze = trE * cmplx.Exp(complex(-b.sigma*tau, b.wd*tau))
		}
		// a transient below a nanovolt is over
		withTr := cmplx.Abs(ze) > 1e-9
		// noise offsets are multiples of the block: no wrap inside one
		o1, o2 := (n1+start)&mask, (n2+start)&mask
		out1, out2 := c1[start:end], c2[start:end]
		nz1 := noise[o1 : o1+len(out1)]
		nz2 := noise[o2 : o2+len(out1)]
		out2 = out2[:len(out1)]
		// pass 1: the output's AC part y and the tone on x. Each sample's
		// phasor is the block start's times a tabulated rotation, so no
		// sample waits for the previous one.
		yb, vb := ybuf[:len(out1)], vbuf[:len(out1)]
		yz := sg.y * zt
		yzr, yzi := real(yz), imag(yz)
		ar, ai := amp*real(zt), amp*imag(zt)
		rr, ri := ripA*real(zr), ripA*imag(zr)
		tt, tr := tabT[:len(yb)], tabR[:len(yb)]
		for k := range yb {
			c, sn := real(tt[k]), imag(tt[k])
			u := yzr*c - yzi*sn
			if withTr {
				u += real(ze)
				ze *= trDecay
			}
			// softLimit inlined for the common small-signal case: below
			// |x| = 0.1 the cubic term of tanh suffices (the next, 2x⁵/15,
			// is under 1.4e-6 relative), deviation scaled by ks
			var y float64
			if x := u * invSat; x < 0.1 && x > -0.1 {
				y = u + u*u*(sq-u*k3)
			} else {
				y = u + ks*(softLimit(u, sat)-u)
			}
			rc, rs := real(tr[k]), imag(tr[k])
			yb[k] = y + rr*rs + ri*rc // ripA·Im(zr·e^(jωr·k·dt))
			vb[k] = ar*c - ai*sn      // amp·Re(zt·e^(jω·k·dt))
		}
		// pass 2: codes (v − offset)/lsb, rounded half up, clipped
		nz2 = nz2[:len(yb)]
		out1, out2 = out1[:len(yb)], out2[:len(yb)]
		vb = vb[:len(yb)]
		for k, y := range yb {
			q1 := base1 + (y+vb[k])*inv1 + float64(nz1[k])*sn1
			q2 := base2 + y*inv2 + float64(nz2[k])*sn2
			if q1 > hi1 {
				q1 = hi1
			} else if q1 < lo1 {
				q1 = lo1
			}
			if q2 > hi2 {
				q2 = hi2
			} else if q2 < lo2 {
				q2 = lo2
			}
			out1[k] = int16(int32(q1+65536.5) - 65536)
			out2[k] = int16(int32(q2+65536.5) - 65536)
		}
	}
}

// softLimit is the output stage's mild nonlinearity:
// Vs·tanh(u/Vs) + u²/(8·Vs), tanh by its series below |x| = 0.25
// (error under 1e-6 relative) and by the (3,2) rational approximation
// x(27+x²)/(27+9x²) above, which is exact (±1) at ±3 and held beyond.
func softLimit(u, sat float64) float64 {
	x := u / sat
	var g float64
	switch {
	case x > 3:
		g = 1
	case x < -3:
		g = -1
	case x < 0.25 && x > -0.25:
		x2 := x * x
		g = x * (1 - x2*(1.0/3-x2*(2.0/15-x2*17.0/315)))
	default:
		x2 := x * x
		g = x * (27 + x2) / (27 + 9*x2)
	}
	return sat*g + u*u/(8*sat)
}

// quantise rounds v (in codes) half up to the nearest integer, clipped
// to [lo, hi].
func quantise(v, lo, hi float64) int16 {
	if v >= hi {
		return int16(hi)
	}
	if v <= lo {
		return int16(lo)
	}
	return int16(int32(v+65536.5) - 65536)
}

// noiseOffsets picks the two channels' starting points in the noise table.
func (b *bench) noiseOffsets() (int, int) {
	return b.rng.IntN(len(b.noise)) &^ 1023, b.rng.IntN(len(b.noise)) &^ 1023
}
