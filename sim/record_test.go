package sim

import (
	"bytes"
	"encoding/binary"
	"fmt"
	"math"
	"math/cmplx"
	"math/rand/v2"
	"slices"
	"testing"
	"time"

	"loopsweep/analysis"
)

// dft is the textbook single-bin DFT over the whole record,
// 2/N·Σ x[n]·e^(−j2πf·n·dt): the phasor (volts peak) of a tone with a
// whole number of cycles in the record, phase referred to sample 0.
// Written here, not taken from package analysis, so a bug in either does
// not hide one in the other.
func dft(x []float64, dt, f float64) complex128 {
	var s complex128
	w := 2 * math.Pi * f * dt
	for n, v := range x {
		s += complex(v, 0) * cmplx.Exp(complex(0, -w*float64(n)))
	}
	return s * complex(2/float64(len(x)), 0)
}

// fetchReal reads a REAL,32 big-endian record of channel ch in volts.
func (c *client) fetchReal(ch int) []float64 {
	b := c.block(fmt.Sprintf("TRAC:DATA? CH%d", ch))
	v := make([]float64, len(b)/4)
	for i := range v {
		v[i] = float64(math.Float32frombits(binary.BigEndian.Uint32(b[4*i:])))
	}
	return v
}

type capture struct {
	x1, x2 []float64
	dt     float64
}

// acquire configures both channels around the output voltage, takes one
// record and returns it.
func acquire(c *client, vout, r1, r2 float64, points int, dt float64) capture {
	c.send(fmt.Sprintf("SENS:SWE:POIN %d;:SENS:SWE:TINT %g", points, dt))
	c.send(fmt.Sprintf("SENS1:VOLT:RANG %g;:SENS1:VOLT:OFFS %g;:SENS2:VOLT:RANG %g;:SENS2:VOLT:OFFS %g", r1, vout, r2, vout))
	c.send("INIT")
	c.query("*OPC?")
	return capture{x1: c.fetchReal(1), x2: c.fetchReal(2), dt: c.number("SENS:SWE:TINT?")}
}

// The simulator's records carry the model's channel phasors: with v_z of
// amplitude A, channel 1 (x) is A/(1+L) and channel 2 (y) is −L·A/(1+L)
// (issue 4; Middlebrook 1975 for the injection, memory). Checked through
// the real TCP server with a single-bin DFT, within the noise.
func TestRecordsMatchModel(t *testing.T) {
	s := startServer(t, Options{Seed: 7})
	sc := s.Scenario()
	g := dial(t, s.GenAddr())
	d := dial(t, s.DigAddr())
	const vpp = 0.04
	amp := vpp / 2
	cases := []struct {
		f      float64
		points int
		dt     float64
	}{
		{1000, 20000, 1e-6},  // 20 cycles, |L| ≫ 1
		{15000, 20000, 1e-6}, // 300 cycles, near crossover
		{50000, 20000, 1e-6}, // 1000 cycles, |L| < 1
	}
	for _, c := range cases {
		l, err := sc.Loop("", c.f)
		if err != nil {
			t.Fatal(err)
		}
		v1 := complex(amp, 0) / (1 + l)
		v2 := -l * v1
		g.send(fmt.Sprintf("FREQ %g;VOLT %g;OUTP ON", c.f, vpp))
		g.query("*OPC?")
		time.Sleep(20 * time.Millisecond) // > 100 settling time constants (0.12 ms)
		r1 := ceil125(1.5*cmplx.Abs(v1)+0.01, MinRangeV, MaxRangeV)
		r2 := ceil125(1.5*cmplx.Abs(v2)+0.01, MinRangeV, MaxRangeV)
		cp := acquire(d, sc.VoutV(), r1, r2, c.points, c.dt)
		m1, m2 := dft(cp.x1, cp.dt, c.f), dft(cp.x2, cp.dt, c.f)
		// σ of a DFT phasor from white noise σn: σn·√(2/N) (Kay, memory);
		// quantisation adds lsb/√12 to σn. 5σ, plus 0.2% for the
		// soft-limit's compression at this amplitude ((A/Vs)²/4 ≈ 4e-4).
		noise := func(r float64) float64 {
			lsb := r / float64(int(1)<<(sc.Meas.ADCBits-1))
			sn := math.Hypot(sc.Meas.NoiseVrms, lsb/math.Sqrt(12))
			return 5 * sn * math.Sqrt(2/float64(c.points))
		}
		tol1 := noise(r1)/cmplx.Abs(v1) + 2e-3
		tol2 := noise(r2)/cmplx.Abs(v2) + 2e-3
		if e := math.Abs(cmplx.Abs(m1)/cmplx.Abs(v1) - 1); e > tol1 {
			t.Errorf("%g Hz: |V1| %.6g V, model %.6g V (rel. error %.2g > %.2g)", c.f, cmplx.Abs(m1), cmplx.Abs(v1), e, tol1)
		}
		if e := math.Abs(cmplx.Abs(m2)/cmplx.Abs(v2) - 1); e > tol2 {
			t.Errorf("%g Hz: |V2| %.6g V, model %.6g V (rel. error %.2g > %.2g)", c.f, cmplx.Abs(m2), cmplx.Abs(v2), e, tol2)
		}
		// package analysis's estimator (a fit of DC, tone and harmonics)
		// must agree with the textbook DFT within the same noise
		a1, a2, err := analysis.EstimatePair(cp.x1, cp.x2, cp.dt, c.f, analysis.ToneOptions{}, analysis.ToneOptions{})
		if err != nil {
			t.Fatalf("%g Hz: EstimatePair: %v", c.f, err)
		}
		if e := cmplx.Abs(a1.Phasor/v1 - m1/v1); e > tol1 {
			t.Errorf("%g Hz: EstimatePair V1 %v, DFT %v", c.f, a1.Phasor, m1)
		}
		if e := cmplx.Abs(a2.Phasor/v2 - m2/v2); e > tol2 {
			t.Errorf("%g Hz: EstimatePair V2 %v, DFT %v", c.f, a2.Phasor, m2)
		}
		// the ratio −V2/V1 is L: phase within the combined noise (rad)
		got := -m2 / m1
		if e := math.Abs(cmplx.Phase(got / l)); e > tol1+tol2 {
			t.Errorf("%g Hz: ∠(−V2/V1) %.3f°, ∠L %.3f°", c.f, cmplx.Phase(got)*180/math.Pi, cmplx.Phase(l)*180/math.Pi)
		}
		// both channels sit on the output voltage (DC operating point)
		if dc := real(dft(cp.x2, cp.dt, 0)) / 2; math.Abs(dc-sc.VoutV()) > 1e-3 {
			t.Errorf("%g Hz: channel 2 DC %.4f V, want the output %.4f V", c.f, dc, sc.VoutV())
		}
	}
}

// A capture started right after a change of frequency reads a biased
// value; one started after the loop settled does not. On the bench model
// directly, with exact times (over TCP the start of the capture would
// depend on the machine's load).
func TestSettlingTransientBiasesEarlyCapture(t *testing.T) {
	// the marginal loop rings at about 6 kHz and decays in 0.15 ms
	sc, err := LoadScenario("marginal")
	if err != nil {
		t.Fatal(err)
	}
	b := newBench(sc, sc.Points[0], 3)
	const f, amp = 8000.0, 0.02
	l, _ := sc.Loop("", f)
	v1 := complex(amp, 0) / (1 + l)
	b.setGenerator(0, true, 2000, amp, 0)
	b.setGenerator(0.0101, true, f, amp, 0)
	cs := chanSetup{rangeV: 0.05, offsetV: sc.VoutV(), bits: 16}
	errAt := func(t0 float64) float64 {
		c1, c2 := make([]int16, 1000), make([]int16, 1000) // 8 cycles at 1 µs
		b.record(c1, c2, t0, 1e-6, cs, cs, 0, 0)
		x := make([]float64, len(c1))
		for i, q := range c1 {
			x[i] = float64(q)*cs.lsb() + cs.offsetV
		}
		return math.Abs(cmplx.Abs(dft(x, 1e-6, f))/cmplx.Abs(v1) - 1)
	}
	early, settled := errAt(0.0101), errAt(0.0301)
	sigma, wd := settlingPole(sc.loop(sc.Points[0].LoadOhm))
	t.Logf("settling pole σ = %.0f/s, ωd/2π = %.0f Hz; |V1| error at the change %.3g, 20 ms later %.3g", sigma, wd/(2*math.Pi), early, settled)
	// 20 ms is over 100 time constants: the settled error is the noise's
	// (about 0.1% here); the early one is the transient's.
	if early < 0.01 || settled > 0.005 || early < 5*settled {
		t.Errorf("transient: error %.3g right after the change, %.3g settled", early, settled)
	}
}

// A large injection compresses the gain and raises the harmonics (near
// crossover, where the loop cannot correct the output stage's soft
// limit); the window clips at offset ± range.
func TestNonlinearityAndClipping(t *testing.T) {
	s := startServer(t, Options{Seed: 5})
	sc := s.Scenario()
	g := dial(t, s.GenAddr())
	d := dial(t, s.DigAddr())
	const f = 15000.0 // crossover: |S| ≈ 1
	measure := func(vpp float64) (gain, h3 float64) {
		g.send(fmt.Sprintf("FREQ %g;VOLT %g;OUTP ON", f, vpp))
		g.query("*OPC?")
		time.Sleep(10 * time.Millisecond)
		r := ceil125(vpp, MinRangeV, MaxRangeV)
		cp := acquire(d, sc.VoutV(), 2*r, 2*r, 20000, 1e-6) // 300 cycles
		v2 := dft(cp.x2, cp.dt, f)
		return cmplx.Abs(v2) / (vpp / 2), cmplx.Abs(dft(cp.x2, cp.dt, 3*f)) / cmplx.Abs(v2)
	}
	gSmall, h3Small := measure(0.02)
	gLarge, h3Large := measure(1.6) // |y| about 1 V peak against a 0.5 V soft limit
	t.Logf("gain %.4f -> %.4f, H3 %.2g -> %.2g", gSmall, gLarge, h3Small, h3Large)
	if gLarge > 0.95*gSmall || h3Large < 10*h3Small || h3Large < 0.01 {
		t.Errorf("no compression: gain %.4f -> %.4f, H3 %.2g -> %.2g", gSmall, gLarge, h3Small, h3Large)
	}
	// clipping: a 1 mV window cannot hold a 20 mV tone
	g.send("FREQ 1000;VOLT 0.04")
	g.query("*OPC?")
	cp := acquire(d, sc.VoutV(), 1e-3, 1e-3, 2000, 1e-6)
	hi, lo := 0, 0
	for _, v := range cp.x2 {
		if v > sc.VoutV()+1e-3 || v < sc.VoutV()-1e-3-1e-3/2048 {
			t.Fatalf("sample %g V outside the window", v)
		}
		if v > sc.VoutV()+0.99e-3 {
			hi++
		}
		if v < sc.VoutV()-0.99e-3 {
			lo++
		}
	}
	if hi == 0 || lo == 0 {
		t.Errorf("no clipped samples (%d high, %d low)", hi, lo)
	}
}

// referenceCodes evaluates the record sample by sample from the bench's
// closed forms, with none of the generator's machinery (blocks, rotation
// tables, the cubic small-signal shortcut, bounds that skip the clip):
// u(t) = steady + transient (cmplx.Exp at every sample), the output
// stage's soft limit (softLimit, or below |u| = 0.1·sat its third-order
// form u + u²/(8·sat) − u³/(3·sat²), tanh x ≈ x − x³/3, which the model
// uses there), the ripple ripA·sin(ωr·t), the injection
// amp·cos(phase + ω(t − start)), the DC levels, unit noise from the same
// table offsets, then round half up and clip.
func referenceCodes(b *bench, n int, t0, dt float64, cs [2]chanSetup, n1, n2 int) (c1, c2 []int16) {
	sc, sg := b.sc, b.seg
	off := sg.offV
	if !sg.on {
		off = 0
	}
	dcY := sc.VoutV() - off*b.t0
	dcX := dcY + off
	if cs[0].ac {
		dcX = 0
	}
	if cs[1].ac {
		dcY = 0
	}
	ks := 1.0
	amp := 0.0
	if sg.on {
		amp = sg.ampV
		ks = 1 / cmplx.Abs(1+b.loop.eval(complex(0, 2*math.Pi*sg.freqHz)))
	}
	code := func(v float64, c chanSetup) int16 {
		hi := float64(int(1)<<(c.bits-1) - 1)
		q := math.Floor((v-c.offsetV)/c.lsb() + 0.5)
		return int16(math.Max(-hi-1, math.Min(hi, q)))
	}
	mask := len(b.noise) - 1
	c1, c2 = make([]int16, n), make([]int16, n)
	for i := range n {
		t := t0 + float64(i)*dt
		u := b.steady(sg, t) + b.transient(t)
		sat := sc.Meas.SaturationV
		var y float64
		if x := u / sat; math.Abs(x) < 0.1 {
			y = u + ks*(u*u/(8*sat)-u*u*u/(3*sat*sat))
		} else {
			y = u + ks*(softLimit(u, sat)-u)
		}
		y += sc.Meas.RippleVpp / 2 * math.Sin(2*math.Pi*sc.SwitchingHz*t)
		v := 0.0
		if sg.on {
			v = amp * math.Cos(sg.phase+2*math.Pi*sg.freqHz*(t-sg.start))
		}
		nz1 := float64(b.noise[(n1&^1023+i)&mask]) * sc.Meas.NoiseVrms
		nz2 := float64(b.noise[(n2&^1023+i)&mask]) * sc.Meas.NoiseVrms
		c1[i] = code(dcX+y+v+nz1, cs[0])
		c2[i] = code(dcY+y+nz2, cs[1])
	}
	return c1, c2
}

// The block generator agrees with the sample-by-sample reference: every
// code within one step (a sum rounded differently can land on the other
// side of a half code) and all but a few per ten thousand identical, in
// the cases the fast paths take and in those they must leave: a
// transient in progress, a swing outside the small-signal range, a
// window that clips, a record that is not a whole number of blocks,
// 8 and 16 bits; with the AVX2 kernels and with the Go loops.
func TestRecordMatchesReference(t *testing.T) {
	sc, err := LoadScenario("marginal")
	if err != nil {
		t.Fatal(err)
	}
	cases := []struct {
		name      string
		at        float64 // capture start after the last change at 0.01 s
		f, amp    float64
		r1, r2    float64
		bits, n   int
		alternate bool // channel 2 AC coupled
	}{
		{"steady small signal", 0.02, 8000, 0.02, 0.05, 0.05, 12, 20000, false},
		{"transient in progress", 0.0100005, 8000, 0.02, 0.05, 0.05, 16, 20000, false},
		{"large swing", 0.02, 8000, 0.8, 2, 2, 12, 5000, false},
		{"clipping window", 0.02, 2000, 0.04, 0.002, 0.002, 8, 5000, false},
		{"partial block, AC coupled", 0.02, 15000, 0.02, 0.05, 0.02, 14, 3333, true},
	}
	defer func(v bool) { useAVX2 = v }(useAVX2)
	kernels := []bool{false}
	if useAVX2 {
		kernels = append(kernels, true) // the vector kernels, and the Go loops they replace
	}
	for _, avx := range kernels {
		useAVX2 = avx
		for _, c := range cases {
			t.Run(fmt.Sprintf("%s/avx2=%v", c.name, avx), func(t *testing.T) {
				testRecordCase(t, sc, c.at, c.f, c.amp, c.r1, c.r2, c.bits, c.n, c.alternate)
			})
		}
	}
}

// testRecordCase checks one case of TestRecordMatchesReference through
// both of the generator's paths: codes alone (record) and codes with
// their REAL,32 blocks (generate, as INITiate does).
func testRecordCase(t *testing.T, sc *Scenario, at, f, amp, r1, r2 float64, bits, n int, alternate bool) {
	t.Helper()
	b := newBench(sc, sc.Points[0], 11)
	b.setGenerator(0, true, 1000, amp, 0)
	b.setGenerator(0.01, true, f, amp, 0)
	cs := [2]chanSetup{
		{rangeV: r1, offsetV: sc.VoutV(), bits: bits},
		{rangeV: r2, offsetV: sc.VoutV(), bits: bits, ac: alternate},
	}
	if alternate {
		cs[1].offsetV = 0
	}
	const dt = 1e-6
	want1, want2 := referenceCodes(b, n, at, dt, cs, 4096, 77777)
	got1, got2 := make([]int16, n), make([]int16, n)
	b.record(got1, got2, at, dt, cs[0], cs[1], 4096, 77777)
	enc1, enc2, enc := b.generate(n, at, dt, cs, "REAL,32", false, 4096, 77777)
	for i, codes := range [][]int16{enc1, enc2} {
		if want := encodeRecord(codes, cs[i], "REAL,32", false); !bytes.Equal(enc[i].reply, want.reply) {
			t.Errorf("channel %d: generate's REAL,32 block is not its codes' encoding", i+1)
		}
	}
	if r1 < amp {
		// the case must reach the rails to check the clip
		hi := int16(int(1)<<(bits-1) - 1)
		if !slices.Contains(got1, hi) || !slices.Contains(got1, -hi-1) {
			t.Fatalf("no clipped code in a %g V window for a %g V tone", r1, amp)
		}
	}
	for _, pair := range []struct {
		name      string
		got, want []int16
	}{{"record ch1", got1, want1}, {"record ch2", got2, want2}, {"generate ch1", enc1, want1}, {"generate ch2", enc2, want2}} {
		diff := 0
		for i := range pair.got {
			d := int(pair.got[i]) - int(pair.want[i])
			if d > 1 || d < -1 {
				t.Fatalf("%s sample %d: code %d, reference %d", pair.name, i, pair.got[i], pair.want[i])
			}
			if d != 0 {
				diff++
			}
		}
		if diff*10000 > 5*n {
			t.Errorf("%s: %d of %d codes differ by one", pair.name, diff, n)
		} else if diff > 0 {
			t.Logf("%s: %d of %d codes differ by one", pair.name, diff, n)
		}
	}
}

// generate's REAL,32 blocks, encoded in the same pass as the codes, are
// byte for byte what encodeRecord writes from the codes, in both byte
// orders; other formats go through encodeRecord itself.
func TestGenerateEncodesLikeEncodeRecord(t *testing.T) {
	sc, err := LoadScenario("")
	if err != nil {
		t.Fatal(err)
	}
	b := newBench(sc, sc.Points[0], 2)
	b.setGenerator(0, true, 12000, 0.03, 0)
	cs := [2]chanSetup{{rangeV: 0.05, offsetV: sc.VoutV(), bits: 12}, {rangeV: 0.1, offsetV: sc.VoutV() - 0.01, bits: 12}}
	for _, format := range []string{"REAL,32", "INT,16", "INT,8", "ASC"} {
		for _, swapped := range []bool{false, true} {
			c1, c2, enc := b.generate(200_000+123, 0.02, 1e-7, cs, format, swapped, 0, 1<<19)
			for i, codes := range [][]int16{c1, c2} {
				want := encodeRecord(codes, cs[i], format, swapped)
				if !bytes.Equal(enc[i].reply, want.reply) || enc[i].block != want.block {
					t.Errorf("%s swapped=%v channel %d: generate's reply differs from encodeRecord's", format, swapped, i+1)
				}
			}
		}
	}
}

// With the generator off and no ripple, a channel is the noise alone:
// its variance is σn² plus the quantisation's lsb²/12 (Widrow's model,
// memory; the noise spans many codes), within 5 standard errors of a
// variance estimate, √(2/N) relative (normal samples, memory); the
// samples are white (lag-1 and lag-7 autocorrelation within 5/√N of 0,
// the standard error of a sample autocorrelation, memory) and the two
// channels uncorrelated (same bound).
func TestRecordNoiseStatistics(t *testing.T) {
	sc, err := LoadScenario("")
	if err != nil {
		t.Fatal(err)
	}
	sc2 := *sc
	sc2.Meas.RippleVpp = 0
	b := newBench(&sc2, sc2.Points[0], 9)
	const n = 400_000
	cs := chanSetup{rangeV: 0.005, offsetV: sc2.VoutV(), bits: 12}
	c1, c2, _ := b.generate(n, 0.5, 1e-7, [2]chanSetup{cs, cs}, "REAL,32", false, 1<<18, 3<<18)
	mean := func(x []int16) float64 {
		var s float64
		for _, v := range x {
			s += float64(v)
		}
		return s / float64(len(x))
	}
	m1, m2 := mean(c1), mean(c2)
	cov := func(x []int16, mx float64, y []int16, my float64, lag int) float64 {
		var s float64
		for i := lag; i < len(x); i++ {
			s += (float64(x[i]) - mx) * (float64(y[i-lag]) - my)
		}
		return s / float64(len(x)-lag)
	}
	lsb := cs.lsb()
	want := (sc2.Meas.NoiseVrms*sc2.Meas.NoiseVrms + lsb*lsb/12) / (lsb * lsb) // codes²
	for i, c := range []struct {
		x []int16
		m float64
	}{{c1, m1}, {c2, m2}} {
		v := cov(c.x, c.m, c.x, c.m, 0)
		if e := math.Abs(v/want - 1); e > 5*math.Sqrt(2.0/n) {
			t.Errorf("channel %d: variance %.4g codes², want %.4g (relative error %.3g)", i+1, v, want, e)
		}
		for _, lag := range []int{1, 7} {
			if r := cov(c.x, c.m, c.x, c.m, lag) / v; math.Abs(r) > 5/math.Sqrt(n) {
				t.Errorf("channel %d: lag-%d autocorrelation %.3g", i+1, lag, r)
			}
		}
	}
	if r := cov(c1, m1, c2, m2, 0) / math.Sqrt(cov(c1, m1, c1, m1, 0)*cov(c2, m2, c2, m2, 0)); math.Abs(r) > 5/math.Sqrt(n) {
		t.Errorf("channels correlated: %.3g", r)
	}
}

// The transient after a change of frequency leaks into the single-bin
// DFT of a record as the closed form of a sampled damped exponential
// says: with e(n·dt) = Re{E'·zⁿ}, z = e^(p·dt), p = −σ + jωd, E' the
// transient's amplitude at the record's first sample and w = e^(jω·dt),
//
//	(2/N)·Σ e(n·dt)·w⁻ⁿ = (1/N)·[E'·(1 − (z/w)^N)/(1 − z/w) + conj(E')·(1 − (z̄/w)^N)/(1 − z̄/w)]
//
// (a geometric series). Measured as the DFT of the record less that of
// the same record with the transient removed, on the slow-settling
// scenario file with no noise, no ripple and the soft limit out of reach,
// within the quantisation (two records each within half a code a
// sample). The continuous-time form sweep/settle_sim_test.go bounds with,
// (e^(−σ·td)/T)·[E·(e^((p−jω)T) − 1)/(p − jω) + c.c.], agrees within 2%.
func TestTransientLeakageClosedForm(t *testing.T) {
	sc, err := LoadScenario("../testdata/scenarios/slow-settling.toml")
	if err != nil {
		t.Fatal(err)
	}
	quiet := *sc
	quiet.Meas.NoiseVrms, quiet.Meas.RippleVpp, quiet.Meas.SaturationV = 0, 0, 1e3
	const f1, f2, amp, td = 380.0, 480.0, 0.02, 0.5e-3
	for _, change := range []float64{1, 1 + 0.3/f1, 1 + 0.7/f1} { // three phases at the change
		b := newBench(&quiet, quiet.Points[0], 1)
		b.setGenerator(0, true, f1, amp, 0)
		b.setGenerator(change, true, f2, amp, 0)
		const n = 2000
		dt := 10 / f2 / n // ten cycles
		cs := chanSetup{rangeV: 0.05, offsetV: quiet.VoutV(), bits: 16}
		dftOf := func(b *bench) (complex128, complex128) {
			c1, c2 := make([]int16, n), make([]int16, n)
			b.record(c1, c2, change+td, dt, cs, cs, 0, 0)
			x1, x2 := make([]float64, n), make([]float64, n)
			for i := range c1 {
				x1[i], x2[i] = float64(c1[i])*cs.lsb(), float64(c2[i])*cs.lsb()
			}
			return dft(x1, dt, f2), dft(x2, dt, f2)
		}
		with1, with2 := dftOf(b)
		still := *b
		still.tr.e0 = 0
		without1, without2 := dftOf(&still)
		p := complex(-b.sigma, b.wd)
		e := b.tr.e0 * complex(quiet.Meas.TransientGain, 0) * cmplx.Exp(p*complex(td, 0))
		z, w := cmplx.Exp(p*complex(dt, 0)), cmplx.Exp(complex(0, 2*math.Pi*f2*dt))
		geo := func(e, z complex128) complex128 { return e * (1 - cmplx.Pow(z/w, n)) / (1 - z/w) }
		want := (geo(e, z) + geo(cmplx.Conj(e), cmplx.Conj(z))) / n
		tol := 2 * cs.lsb()
		for ch, got := range []complex128{with1 - without1, with2 - without2} {
			if cmplx.Abs(got-want) > tol {
				t.Errorf("change at %g s, channel %d: leakage %.4g V, closed form %.4g V", change, ch+1, got, want)
			}
		}
		T := n * dt
		jw := complex(0, 2*math.Pi*f2)
		e0 := b.tr.e0 * complex(quiet.Meas.TransientGain, 0)
		cont := func(e, p complex128) complex128 {
			return e * cmplx.Exp(p*complex(td, 0)) * (cmplx.Exp((p-jw)*complex(T, 0)) - 1) / (p - jw)
		}
		approx := (cont(e0, p) + cont(cmplx.Conj(e0), cmplx.Conj(p))) / complex(T, 0)
		if cmplx.Abs(approx-want) > 0.02*cmplx.Abs(want) {
			t.Errorf("change at %g s: continuous form %.4g V, sampled %.4g V", change, approx, want)
		}
		t.Logf("change at %g s: |E| %.3g mV, leakage %.3g µV (%.2f%% of |V1|)", change, 1e3*cmplx.Abs(e0), 1e6*cmplx.Abs(want), 100*cmplx.Abs(want)/cmplx.Abs(without1))
	}
}

// The AVX2 kernels compute what the Go loops they replace compute (with
// and without a transient, with and without the clip): fill's
// outputs within a few ulps (fused multiply-adds round once where Go
// rounds twice), quantiseEncode's codes equal except where the value sits
// within 1e-9 of a half code, and every REAL,32 word the table's for its
// code (the gather). Random phasors, tables and noise, codes of both
// signs.
func TestKernelsMatchGoLoops(t *testing.T) {
	if !useAVX2 {
		t.Skip("no AVX2+FMA on this machine: only the Go loops run")
	}
	defer func(v bool) { useAVX2 = v }(useAVX2)
	rng := rand.New(rand.NewPCG(3, 4))
	tabs := new(phasorTables)
	for k := range block {
		tabs.set(k, cmplx.Rect(1, rng.Float64()*7), cmplx.Rect(1, rng.Float64()*7), cmplx.Rect(rng.Float64(), rng.Float64()*7))
	}
	nz := new([block]float32)
	for k := range nz {
		nz[k] = float32(rng.NormFloat64())
	}
	cs := chanSetup{rangeV: 0.05, offsetV: 3.3, bits: 14}
	tab := newReal32Codes(cs, false)
	neg, pos := false, false
	for trial := range 20 {
		ph := blockPhasors{
			y: cmplx.Rect(0.04*rng.Float64(), rng.Float64()*7),
			v: cmplx.Rect(0.02*rng.Float64(), rng.Float64()*7),
			r: cmplx.Rect(0.004*rng.Float64(), rng.Float64()*7),
		}
		if trial%2 == 1 {
			ph.e = cmplx.Rect(0.01*rng.Float64(), rng.Float64()*7) // a transient in progress
		}
		nl := nonlin{sat: 0.5, ks: rng.Float64(), sq: 0.3 * rng.Float64(), k3: rng.Float64()}
		var xg, yg, xa, ya [block]float64
		useAVX2 = false
		ph.fill(&xg, &yg, tabs, nl)
		useAVX2 = true
		ph.fill(&xa, &ya, tabs, nl)
		for k := range block {
			if math.Abs(xa[k]-xg[k]) > 1e-15 || math.Abs(ya[k]-yg[k]) > 1e-15 {
				t.Fatalf("trial %d sample %d: AVX2 fill (%g, %g), Go (%g, %g)", trial, k, xa[k], ya[k], xg[k], yg[k])
			}
		}
		// every third trial a window the block overflows (clipped)
		c := cs
		clip := trial%3 == 2
		if clip {
			c.rangeV = 0.01
		}
		a := newADC(c, cs.offsetV+0.01*(rng.Float64()-0.5), 1e-4)
		var og, oa [block]int16
		var bg, ba [4 * block]byte
		useAVX2 = false
		a.quantiseEncode(&og, &bg, tab, &xg, nz, clip)
		useAVX2 = true
		a.quantiseEncode(&oa, &ba, tab, &xg, nz, clip)
		if clip {
			hi := int16(1<<(c.bits-1) - 1)
			if !slices.Contains(oa[:], hi) && !slices.Contains(oa[:], -hi-1) {
				t.Fatalf("trial %d: no clipped code", trial)
			}
		}
		for k := range block {
			if oa[k] != og[k] {
				q := a.base + xg[k]*a.inv + float64(nz[k])*a.sn
				if math.Abs(q-math.Round(q)) > 1e-9 { // not a tie
					t.Fatalf("trial %d sample %d: AVX2 code %d, Go %d (value %.12f)", trial, k, oa[k], og[k], q-65536)
				}
			}
			if got, want := binary.LittleEndian.Uint32(ba[4*k:]), tab[uint16(oa[k])]; got != want {
				t.Fatalf("trial %d sample %d: REAL,32 word %#x, the table's for code %d is %#x", trial, k, got, oa[k], want)
			}
			neg, pos = neg || oa[k] < 0, pos || oa[k] > 0
		}
	}
	if !neg || !pos {
		t.Fatalf("codes of one sign only: the gather's index mask is not exercised")
	}
}
