package sim

import (
	"syscall"
	"testing"
	"time"
)

// cpuSeconds is the process's user+system CPU time.
func cpuSeconds() float64 {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return float64(ru.Utime.Nano()+ru.Stime.Nano()) / 1e9
}

// sink keeps the reference pass's output alive.
var sink []byte

// BenchmarkRecord makes one acquisition as INITiate does (generate): a
// two-channel record of 1e6 samples at 10 MS/s (0.1 s of acquisition),
// both channels' codes and their REAL,32 blocks (the format the built-in
// digitizer profile fetches: FORMat:DATA REAL,32), into buffers
// allocated afresh as the server does. It reports
//
//   - samples/s per channel;
//   - x-realtime: the acquisition time over the wall time to make it
//     (target ≥ 10; long records are split over the cores);
//   - x-realtime-cpu: the same over the process's CPU time, all cores
//     together;
//   - x-copy: generation time over a reference measured in the same run,
//     allocating and copying the same 12 MB of output (the least any
//     generator writing these bytes could cost), so the figure means
//     something on a loaded machine.
func BenchmarkRecord(b *testing.B) {
	sc, err := LoadScenario("")
	if err != nil {
		b.Fatal(err)
	}
	bn := newBench(sc, sc.Points[0], 1)
	bn.setGenerator(0, true, 15e3, 0.02, 0)
	const n, dt = 1_000_000, 1e-7
	cs := chanSetup{rangeV: 0.05, offsetV: sc.VoutV(), bits: sc.Meas.ADCBits}
	setup := [2]chanSetup{cs, cs}
	src := make([]byte, 12*n)
	b.ResetTimer()
	t0, c0 := time.Now(), cpuSeconds()
	for i := 0; i < b.N; i++ {
		bn.generate(n, 0.01, dt, setup, "REAL,32", false, 0, 12345)
	}
	el := time.Since(t0).Seconds() / float64(b.N)
	cpu := (cpuSeconds() - c0) / float64(b.N)
	b.StopTimer()
	t1 := time.Now()
	for i := 0; i < b.N; i++ {
		// two int16 and two REAL,32 channels
		for _, sz := range []int{2 * n, 2 * n, 4 * n, 4 * n} {
			sink = make([]byte, sz)
			copy(sink, src[:sz])
		}
	}
	ref := time.Since(t1).Seconds() / float64(b.N)
	b.ReportMetric(n/el, "samples/s")
	b.ReportMetric(n*dt/el, "x-realtime")
	if cpu > 0 {
		b.ReportMetric(n*dt/cpu, "x-realtime-cpu")
	}
	b.ReportMetric(el/ref, "x-copy")
}
