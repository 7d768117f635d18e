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

// BenchmarkRecord generates one two-channel record of 1e6 samples at
// 10 MS/s (0.1 s of acquisition) and encodes both channels as REAL,32
// blocks, as a fetch does. It reports samples/s (per channel) and
// x-realtime: the record's acquisition time over the time to generate
// and encode it (target ≥ 10), and x-realtime-cpu, the same over the
// process's CPU time (steadier on a shared machine).
func BenchmarkRecord(b *testing.B) {
	sc, err := LoadScenario("")
	if err != nil {
		b.Fatal(err)
	}
	bn := newBench(sc, sc.Points[0], 1)
	bn.setGenerator(0, true, 15e3, 0.02, 0)
	const n, dt = 1_000_000, 1e-7
	cs := chanSetup{rangeV: 0.05, offsetV: sc.VoutV(), bits: sc.Meas.ADCBits}
	c1, c2 := make([]int16, n), make([]int16, n)
	b.ResetTimer()
	t0, c0 := time.Now(), cpuSeconds()
	for i := 0; i < b.N; i++ {
		bn.record(c1, c2, 0.01, dt, cs, cs, 0, 12345)
		encodeRecord(c1, cs, "REAL,32", false)
		encodeRecord(c2, cs, "REAL,32", false)
	}
	el := time.Since(t0).Seconds() / float64(b.N)
	cpu := (cpuSeconds() - c0) / float64(b.N)
	b.ReportMetric(n/el, "samples/s")
	b.ReportMetric(n*dt/el, "x-realtime")
	if cpu > 0 {
		b.ReportMetric(n*dt/cpu, "x-realtime-cpu")
	}
}
