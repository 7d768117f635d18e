package instr

import (
	"bufio"
	"context"
	"encoding/binary"
	"io"
	"math"
	"net"
	"runtime"
	"strconv"
	"testing"
	"time"
)

// blockServer answers every command line with payload on a loopback
// socket, so the benchmark reads real TCP like a fetch from a digitizer.
func blockServer(b testing.TB, payload []byte) string {
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		b.Fatal(err)
	}
	b.Cleanup(func() { ln.Close() })
	go func() {
		c, err := ln.Accept()
		if err != nil {
			return
		}
		defer c.Close()
		r := bufio.NewReader(c)
		for {
			if _, err := r.ReadString('\n'); err != nil {
				return
			}
			if _, err := c.Write(payload); err != nil {
				return
			}
		}
	}()
	return "tcp://" + ln.Addr().String()
}

// benchFetch measures a QueryBlock of n samples against the reference,
// a plain io.ReadFull of the same reply bytes from the same socket, in
// the same run; it reports both rates and their ratio.
func benchFetch(b *testing.B, enc Encoding, n int) {
	size := enc.Size()
	data := make([]byte, n*size)
	for i := range n {
		switch enc {
		case Int16:
			binary.BigEndian.PutUint16(data[2*i:], uint16(int16(i)))
		case Real32:
			binary.BigEndian.PutUint32(data[4*i:], math.Float32bits(float32(i)*1e-3))
		}
	}
	c := strconv.Itoa(len(data))
	payload := append(append([]byte("#"+strconv.Itoa(len(c))+c), data...), '\n')
	addr := blockServer(b, payload)
	conn, err := Open(addr, Options{})
	if err != nil {
		b.Fatal(err)
	}
	defer conn.Close()
	s := NewSession(conn, 10*time.Second)
	ctx := context.Background()
	dst := make([]float64, n)
	raw := make([]byte, len(payload))
	f := DataFormat{Encoding: enc, Scale: 1}
	var tDecode, tRef time.Duration
	b.SetBytes(int64(len(payload)))
	b.ReportAllocs()
	b.ResetTimer()
	for range b.N {
		t0 := time.Now()
		if err := s.QueryBlock(ctx, "TRACe:DATA? CH1", f, dst); err != nil {
			b.Fatal(err)
		}
		t1 := time.Now()
		if _, err := conn.Write([]byte("TRACe:DATA? CH1\n")); err != nil {
			b.Fatal(err)
		}
		if _, err := io.ReadFull(conn, raw); err != nil {
			b.Fatal(err)
		}
		tDecode += t1.Sub(t0)
		tRef += time.Since(t1)
	}
	b.StopTimer()
	mb := float64(len(payload)) * float64(b.N) / 1e6
	b.ReportMetric(mb/tDecode.Seconds(), "decode-MB/s")
	b.ReportMetric(mb/tRef.Seconds(), "readfull-MB/s")
	b.ReportMetric(tDecode.Seconds()/tRef.Seconds(), "decode/readfull")
	if dst[n-1] != float64(int16(n-1)) && enc == Int16 {
		b.Fatalf("last sample %v", dst[n-1])
	}
}

func BenchmarkFetchInt16(b *testing.B)  { benchFetch(b, Int16, 4_000_000) }
func BenchmarkFetchReal32(b *testing.B) { benchFetch(b, Real32, 4_000_000) }

// TestFetchAllocatesNoRecordCopy checks the streaming claim: fetching a
// record of a million REAL32 samples into a preallocated slice allocates
// a few small objects and far less than one more copy of the record
// (4 MB as bytes, 8 MB as float64), after the session's reusable buffer
// exists.
func TestFetchAllocatesNoRecordCopy(t *testing.T) {
	const n = 1_000_000
	data := make([]byte, 4*n)
	c := strconv.Itoa(len(data))
	payload := append(append([]byte("#"+strconv.Itoa(len(c))+c), data...), '\n')
	conn, err := Open(blockServer(t, payload), Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	s := NewSession(conn, 5*time.Second)
	dst := make([]float64, n)
	f := DataFormat{Encoding: Real32}
	ctx := context.Background()
	if err := s.QueryBlock(ctx, "TRACe:DATA? CH1", f, dst); err != nil { // warm up: allocates the scratch buffer
		t.Fatal(err)
	}
	const fetches = 5
	var before, after runtime.MemStats
	runtime.ReadMemStats(&before)
	for range fetches {
		if err := s.QueryBlock(ctx, "TRACe:DATA? CH1", f, dst); err != nil {
			t.Fatal(err)
		}
	}
	runtime.ReadMemStats(&after)
	perBytes := (after.TotalAlloc - before.TotalAlloc) / fetches
	perObjs := (after.Mallocs - before.Mallocs) / fetches
	t.Logf("per fetch of %d samples: %d bytes in %d allocations", n, perBytes, perObjs)
	if perBytes > 64<<10 {
		t.Errorf("a fetch allocated %d bytes; a copy of the record would be %d", perBytes, len(data))
	}
}
