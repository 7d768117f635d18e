package sim

import (
	"encoding/binary"
	"math"
	"math/bits"
	"math/cmplx"
	"math/rand/v2"
	"runtime"
	"strconv"
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

	noise    []float32 // unit-variance Gaussian samples, a power-of-two table
	noiseMax float64   // the largest |sample| in the table
	rng      *rand.Rand
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
		b.noiseMax = max(b.noiseMax, math.Abs(float64(b.noise[i])))
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

// generate makes one acquisition's data from the bench: both channels'
// codes (record) and each channel's reply in the format and byte order
// given, as encodeRecord would write it. REAL,32, the format the
// built-in digitizer profile fetches, is encoded in the same pass as the
// codes; other formats by encodeRecord afterwards.
func (b *bench) generate(n int, t0, dt float64, setup [2]chanSetup, format string, swapped bool, n1, n2 int) (c1, c2 []int16, enc [2]result) {
	c1, c2 = make([]int16, n), make([]int16, n)
	if format != "REAL,32" {
		b.record(c1, c2, t0, dt, setup[0], setup[1], n1, n2)
		return c1, c2, [2]result{encodeRecord(c1, setup[0], format, swapped), encodeRecord(c2, setup[1], format, swapped)}
	}
	out1, body1 := blockBuffer(4 * n)
	out2, body2 := blockBuffer(4 * n)
	b.recordEncoded(c1, c2, body1, body2, swapped, t0, dt, setup[0], setup[1], n1, n2)
	return c1, c2, [2]result{{reply: out1, block: true}, {reply: out2, block: true}}
}

// blockBuffer returns an IEEE 488.2 definite-length block of nb bytes,
// #<digits><count><body> (IEEE 488.2, memory), and its body to fill. The
// capacity has one byte more for the reply's newline.
func blockBuffer(nb int) (out, body []byte) {
	count := strconv.Itoa(nb)
	out = make([]byte, 0, 2+len(count)+nb+1)
	out = append(out, '#', byte('0'+len(count)))
	out = append(out, count...)
	h := len(out)
	out = out[:h+nb]
	return out, out[h:]
}

// record fills c1 (node x) and c2 (node y) with ADC codes for samples at
// t0 + n·dt. volts = code·lsb + offset, codes clipped to the signed
// range of the channel's bits.
//
// n1 and n2 are where the channels start reading the noise table (pick
// them with noiseOffsets). record only reads b, so it may run on a copy
// taken when the acquisition started.
func (b *bench) record(c1, c2 []int16, t0, dt float64, s1, s2 chanSetup, n1, n2 int) {
	b.recordEncoded(c1, c2, nil, nil, false, t0, dt, s1, s2, n1, n2)
}

// recordEncoded is record that also writes each channel's codes as
// REAL,32 volts (code·lsb + offset rounded to float32, 4 bytes a sample,
// big-endian unless swapped) into e1 and e2 when they are not nil, in the
// same pass while the codes are in cache.
//
// Long records are generated in parallel pieces (every block of 1024
// samples restarts from exact phasors, so the pieces are independent).
func (b *bench) recordEncoded(c1, c2 []int16, e1, e2 []byte, swapped bool, t0, dt float64, s1, s2 chanSetup, n1, n2 int) {
	var tab [2]*real32Codes
	if e1 != nil {
		tab = [2]*real32Codes{real32Table(s1, swapped), real32Table(s2, swapped)}
		e1, e2 = e1[:4*len(c1)], e2[:4*len(c2)]
	}
	const minPiece = 1 << 16
	workers := min(runtime.GOMAXPROCS(0), len(c1)/minPiece)
	if workers < 2 {
		b.recordPiece(c1, c2, e1, e2, tab, 0, t0, dt, s1, s2, n1, n2)
		return
	}
	per := (len(c1)/workers + 1023) &^ 1023
	var wg sync.WaitGroup
	for lo := 0; lo < len(c1); lo += per {
		hi := min(lo+per, len(c1))
		var p1, p2 []byte
		if e1 != nil {
			p1, p2 = e1[4*lo:4*hi], e2[4*lo:4*hi]
		}
		wg.Add(1)
		go func() {
			defer wg.Done()
			b.recordPiece(c1[lo:hi], c2[lo:hi], p1, p2, tab, lo, t0, dt, s1, s2, n1, n2)
		}()
	}
	wg.Wait()
}

// real32Codes maps each ADC code of a channel to the 4 bytes of its
// REAL,32 volts, float32(code·lsb + offset) as encodeRecord computes
// them, arranged so that binary.LittleEndian.PutUint32 stores them in
// the block's byte order. One load per sample replaces a conversion, a
// multiply-add and a byte swap; indexed by uint16(code), so no bounds
// check (2^bits of the entries are used: 16 KiB at 12 bits).
type real32Codes [1 << 16]uint32

func newReal32Codes(cs chanSetup, swapped bool) *real32Codes {
	lsb, off := cs.lsb(), cs.offsetV
	t := new(real32Codes)
	half := int32(1) << (cs.bits - 1)
	for q := -half; q < half; q++ {
		w := math.Float32bits(float32(float64(q)*lsb + off))
		if !swapped {
			w = bits.ReverseBytes32(w) // NORMal: big-endian
		}
		t[uint16(q)] = w
	}
	return t
}

// real32Key says which table a channel needs.
type real32Key struct {
	lsb, off float64
	bits     int
	swapped  bool
}

// real32Cache keeps the last few tables: a sweep captures many records
// at one range and offset, and at 16 bits a table costs as much as
// generating a short record. Tables are never written once built, so
// acquisitions share them.
var real32Cache struct {
	sync.Mutex
	keys [4]real32Key
	tabs [4]*real32Codes
	next int
}

// real32Table returns the table for cs, from the cache when it holds it.
func real32Table(cs chanSetup, swapped bool) *real32Codes {
	k := real32Key{lsb: cs.lsb(), off: cs.offsetV, bits: cs.bits, swapped: swapped}
	c := &real32Cache
	c.Lock()
	defer c.Unlock()
	for i, ck := range c.keys {
		if ck == k && c.tabs[i] != nil {
			return c.tabs[i]
		}
	}
	t := newReal32Codes(cs, swapped)
	c.keys[c.next], c.tabs[c.next] = k, t
	c.next = (c.next + 1) % len(c.keys)
	return t
}

// block is the number of samples generated from one set of exact
// phasors; the noise table's length is a multiple.
const block = 1024

// recordPiece fills samples first.. of the record into c1 and c2 (and
// e1, e2 with tab when e1 is not nil).
func (b *bench) recordPiece(c1, c2 []int16, e1, e2 []byte, tab [2]*real32Codes, first int, t0, dt float64, s1, s2 chanSetup, n1, n2 int) {
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
	nl := nonlin{sat: sat, ks: ks, sq: ks / (8 * sat), k3: ks / (3 * sat * sat)}
	q1 := newADC(s1, dcX, sigmaN)
	q2 := newADC(s2, dcY, sigmaN)
	n1, n2 = n1&^(block-1), n2&^(block-1)
	// One block is made in buffers that stay in the first-level cache
	// and then copied into the record: copy's wide stores write a large
	// record about twice as fast as one store per sample.
	var xb, yb [block]float64
	var o1, o2 [block]int16
	var b1, b2 [4 * block]byte
	// e^(jω·k·dt), e^(jωr·k·dt) and e^((−σ+jωd)·k·dt) for k in one
	// block, each exact
	tabs := new(phasorTables)
	pd := complex(-b.sigma*dt, b.wd*dt)
	for k := range block {
		tabs.set(k, cmplx.Exp(complex(0, w*dt*float64(k))), cmplx.Exp(complex(0, wr*dt*float64(k))), cmplx.Exp(pd*complex(float64(k), 0)))
	}
	for start := 0; start < len(c1); start += block {
		end := min(start+block, len(c1))
		t := t0 + float64(start)*dt
		// exact phasors at the block start
		zt := cmplx.Exp(complex(0, sg.phase+w*(t-sg.start)))
		zr := cmplx.Exp(complex(0, wr*t))
		var ze complex128
		if tau := t - b.tr.at; tau >= 0 && trE != 0 {
			ze = trE * cmplx.Exp(complex(-b.sigma*tau, b.wd*tau))
		}
		if cmplx.Abs(ze) <= 1e-9 {
			ze = 0 // a transient below a nanovolt is over
		}
		ph := blockPhasors{y: sg.y * zt, v: complex(amp, 0) * zt, r: complex(ripA, 0) * zr, e: ze}
		ph.fill(&xb, &yb, tabs, nl)
		// noise offsets are multiples of the block: no wrap inside one
		k1, k2 := (n1+start)&mask, (n2+start)&mask
		nz1, nz2 := (*[block]float32)(noise[k1:]), (*[block]float32)(noise[k2:])
		// a bound on the block's swing: the output's tone and transient
		// through the cubic, the ripple, and on x the injection
		clip1, clip2 := true, true
		if u := cmplx.Abs(ph.y) + cmplx.Abs(ph.e); u/sat < smallSignal {
			by := u + u*u*(nl.sq+u*nl.k3) + ripA
			clip1 = q1.mayClip(by+amp, b.noiseMax)
			clip2 = q2.mayClip(by, b.noiseMax)
		}
		// A full block whose conversion runs as a vector kernel is
		// written straight into the record (its wide stores need no
		// buffer); the others go through the buffers.
		direct := end-start == block && e1 != nil && useAVX2
		p1, p2, d1, d2 := &o1, &o2, &b1, &b2
		if direct {
			p1, p2 = (*[block]int16)(c1[start:]), (*[block]int16)(c2[start:])
			d1, d2 = (*[4 * block]byte)(e1[4*start:]), (*[4 * block]byte)(e2[4*start:])
		}
		if e1 == nil {
			q1.quantise(p1, &xb, nz1, clip1)
			q2.quantise(p2, &yb, nz2, clip2)
		} else {
			q1.quantiseEncode(p1, d1, tab[0], &xb, nz1, clip1)
			q2.quantiseEncode(p2, d2, tab[1], &yb, nz2, clip2)
		}
		if !direct {
			if e1 != nil {
				copy(e1[4*start:4*end], b1[:])
				copy(e2[4*start:4*end], b2[:])
			}
			copy(c1[start:end], o1[:])
			copy(c2[start:end], o2[:])
		}
	}
}

// phasorTables hold one block's rotations of the tone, the ripple and
// the transient's decay, e^(p·k·dt) for k = 0..block−1, as real and
// imaginary parts in separate arrays (so a vector kernel loads four
// consecutive samples' worth at once). The layout is fixed:
// record_amd64.s addresses the arrays by offset.
type phasorTables struct {
	toneC, toneS [block]float64 // e^(jω·k·dt)
	ripC, ripS   [block]float64 // e^(jωr·k·dt)
	decC, decS   [block]float64 // e^((−σ+jωd)·k·dt)
}

func (t *phasorTables) set(k int, tone, ripple, decay complex128) {
	t.toneC[k], t.toneS[k] = real(tone), imag(tone)
	t.ripC[k], t.ripS[k] = real(ripple), imag(ripple)
	t.decC[k], t.decS[k] = real(decay), imag(decay)
}

// nonlin is the output stage's soft limit as recordPiece applies it:
// y = u + ks·(g(u) − u) (see softLimit); sq = ks/(8·sat) and
// k3 = ks/(3·sat²) are the cubic approximation's coefficients.
type nonlin struct{ sat, ks, sq, k3 float64 }

// smallSignal bounds |u|/sat below which the cubic term of tanh suffices
// (the next, 2x⁵/15, is under 1.4e-6 relative).
const smallSignal = 0.1

// blockPhasors are one block's complex amplitudes at its first sample:
// the output's steady tone y, the generator's tone v, the ripple r and
// the transient e (volts).
type blockPhasors struct{ y, v, r, e complex128 }

// fill writes the output's AC part into yb and the feedback node's
// (output plus injection) into xb, sample k being each phasor times its
// tabulated rotation, so no sample waits for the previous one. Blocks
// whose swing stays in the small-signal range (bounded by |y| + |e|, as
// the transient only decays) take a loop without a branch per sample,
// and without the transient's terms once it is over; the small-signal
// loops run as an AVX2 kernel where the CPU has it (record_amd64.s).
//
//go:noinline
func (ph blockPhasors) fill(xb, yb *[block]float64, tab *phasorTables, nl nonlin) {
	tc, ts, rc, rs, dc, ds := &tab.toneC, &tab.toneS, &tab.ripC, &tab.ripS, &tab.decC, &tab.decS
	yr, yi := real(ph.y), imag(ph.y)
	vr, vi := real(ph.v), imag(ph.v)
	rr, ri := real(ph.r), imag(ph.r)
	er, ei := real(ph.e), imag(ph.e)
	sq, k3 := nl.sq, nl.k3
	small := (cmplx.Abs(ph.y)+cmplx.Abs(ph.e))/nl.sat < smallSignal
	if small && fillSmallFast(xb, yb, tab, &[10]float64{yr, yi, vr, vi, rr, ri, sq, k3, er, ei}) {
		return
	}
	switch {
	case small && ph.e == 0:
		for k := range block {
			c, s := tc[k], ts[k]
			u := yr*c - yi*s
			y := u + u*u*(sq-u*k3) + rr*rs[k] + ri*rc[k]
			yb[k] = y
			xb[k] = y + vr*c - vi*s
		}
	case small:
		for k := range block {
			c, s := tc[k], ts[k]
			u := yr*c - yi*s + er*dc[k] - ei*ds[k]
			y := u + u*u*(sq-u*k3) + rr*rs[k] + ri*rc[k]
			yb[k] = y
			xb[k] = y + vr*c - vi*s
		}
	default:
		for k := range block {
			c, s := tc[k], ts[k]
			u := yr*c - yi*s + er*dc[k] - ei*ds[k]
			var y float64
			if x := u / nl.sat; x < smallSignal && x > -smallSignal {
				y = u + u*u*(sq-u*k3)
			} else {
				y = u + nl.ks*(softLimit(u, nl.sat)-u)
			}
			y += rr*rs[k] + ri*rc[k] // ripA·Im(zr·e^(jωr·k·dt))
			yb[k] = y
			xb[k] = y + vr*c - vi*s // amp·Re(zt·e^(jω·k·dt))
		}
	}
}

// adc is one channel's conversion of volts to codes: code = round half
// up of (v + dc − offset)/lsb + noise·σ/lsb, clipped to [lo, hi].
type adc struct {
	base     float64 // (dc − offset)/lsb + 65536.5: rounding by truncation of a positive value
	inv      float64 // 1/lsb
	sn       float64 // σ/lsb
	flo, fhi float64 // lo and hi + 65536
}

func newADC(cs chanSetup, dcV, noiseV float64) adc {
	inv := 1 / cs.lsb()
	hi := float64(int(1)<<(cs.bits-1) - 1)
	return adc{base: (dcV-cs.offsetV)*inv + 65536.5, inv: inv, sn: noiseV * inv, flo: -hi - 1 + 65536, fhi: hi + 65536}
}

// mayClip reports whether a block whose AC part stays within ±swing
// volts, with noise samples within ±nzMax, might reach the window's
// edges (a code of margin is kept for the bound's own rounding).
func (a *adc) mayClip(swing, nzMax float64) bool {
	d := swing*a.inv + nzMax*a.sn + 1
	return a.base-d < a.flo || a.base+d > a.fhi
}

// clipTrunc clips q to [lo, hi] before truncating it to an integer, so
// no value is out of range.
func clipTrunc(q, lo, hi float64) int32 {
	if q > hi {
		q = hi
	}
	if q < lo {
		q = lo
	}
	return int32(q)
}

// quantise writes the codes of v plus noise into out, skipping the clip
// when the caller has bounded the block's swing within the window (clip
// false).
//
//go:noinline
func (a *adc) quantise(out *[block]int16, v *[block]float64, nz *[block]float32, clip bool) {
	base, inv, sn, lo, hi := a.base, a.inv, a.sn, a.flo, a.fhi
	o, vs, ns := out[:], v[:], nz[:] // one nil check each, not one a sample
	if !clip {
		for k := range block {
			o[k] = int16(int32(base+vs[k]*inv+float64(ns[k])*sn) - 65536)
		}
		return
	}
	for k := range block {
		o[k] = int16(clipTrunc(base+vs[k]*inv+float64(ns[k])*sn, lo, hi) - 65536)
	}
}

// quantiseEncode is quantise that also writes each code's REAL,32 word
// from tab into body. It runs as an AVX2 kernel where the CPU has it
// (record_amd64.s).
//
//go:noinline
func (a *adc) quantiseEncode(out *[block]int16, body *[4 * block]byte, tab *real32Codes, v *[block]float64, nz *[block]float32, clip bool) {
	base, inv, sn, lo, hi := a.base, a.inv, a.sn, a.flo, a.fhi
	if quantiseEncodeFast(out, body, tab, v, nz, &[5]float64{base, inv, sn, lo, hi}) {
		return
	}
	o, bs, vs, ns, ws := out[:], body[:], v[:], nz[:], tab[:]
	if !clip {
		for k := range block {
			q := int32(base+vs[k]*inv+float64(ns[k])*sn) - 65536
			o[k] = int16(q)
			binary.LittleEndian.PutUint32(bs[4*k:], ws[uint16(q)])
		}
		return
	}
	for k := range block {
		q := clipTrunc(base+vs[k]*inv+float64(ns[k])*sn, lo, hi) - 65536
		o[k] = int16(q)
		binary.LittleEndian.PutUint32(bs[4*k:], ws[uint16(q)])
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

// noiseOffsets picks the two channels' starting points in the noise table.
func (b *bench) noiseOffsets() (int, int) {
	return b.rng.IntN(len(b.noise)) &^ 1023, b.rng.IntN(len(b.noise)) &^ 1023
}
