package instr

import (
	"bufio"
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"net"
	"strings"
	"sync"
	"testing"
	"time"

	"loopsweep/instr/instrtest"
)

// dial opens a Session to a scripted server.
func dial(t *testing.T, timeout time.Duration, script ...instrtest.Step) (*Session, *instrtest.Server) {
	t.Helper()
	srv := instrtest.NewServer(t, script...)
	c, err := Open(srv.Addr(), Options{})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { c.Close() })
	return NewSession(c, timeout), srv
}

func TestSessionBasic(t *testing.T) {
	ctx := context.Background()
	s, _ := dial(t, 2*time.Second,
		instrtest.Step{Cmd: "*IDN?", Reply: "Acme Testworks,WG-1,0001,1.0\n"},
		instrtest.Step{Cmd: "*RST"},
		instrtest.Step{Cmd: "*CLS"},
		instrtest.Step{Cmd: "SOURce1:FREQuency 1000"},
		instrtest.Step{Cmd: "SOURce1:FREQuency?", Reply: "+1.00000000E+03\r\n"},
		instrtest.Step{Cmd: "*OPC?", Reply: "1\n"},
		instrtest.Step{Cmd: "BOGus"},
		// Error-queue replies in SCPI-1999 form (memory): -113 is
		// "Undefined header", 0 ends the queue.
		instrtest.Step{Cmd: "SYSTem:ERRor?", Reply: `-113,"Undefined header"` + "\n"},
		instrtest.Step{Cmd: "SYSTem:ERRor?", Reply: `-222,"Data out of range; ""FREQ"" too high"` + "\n"},
		instrtest.Step{Cmd: "SYSTem:ERRor?", Reply: `+0,"No error"` + "\n"},
		instrtest.Step{Cmd: "SYSTem:ERRor?", Reply: `0,"No error"` + "\n"},
	)
	idn, err := s.IDN(ctx)
	if err != nil || idn != "Acme Testworks,WG-1,0001,1.0" {
		t.Fatalf("IDN = %q, %v", idn, err)
	}
	if err := s.Reset(ctx); err != nil {
		t.Fatal(err)
	}
	if err := s.Clear(ctx); err != nil {
		t.Fatal(err)
	}
	if err := s.Write(ctx, "SOURce1:FREQuency 1000"); err != nil {
		t.Fatal(err)
	}
	f, err := s.QueryNumber(ctx, "SOURce1:FREQuency?")
	if err != nil || f != 1000 {
		t.Fatalf("QueryNumber = %v, %v; want 1000", f, err)
	}
	if err := s.OPC(ctx, 0); err != nil {
		t.Fatal(err)
	}
	if err := s.Write(ctx, "BOGus"); err != nil {
		t.Fatal(err)
	}
	err = s.DrainErrors(ctx)
	var ie *InstrumentError
	if !errors.As(err, &ie) {
		t.Fatalf("DrainErrors = %v, want *InstrumentError", err)
	}
	if ie.Code != -113 || ie.Msg != "Undefined header" || ie.Cmd != "BOGus" {
		t.Errorf("first error = %+v, want -113 Undefined header after BOGus", ie)
	}
	if !strings.Contains(err.Error(), `Data out of range; "FREQ" too high`) {
		t.Errorf("DrainErrors = %q, want the second entry with its quotes undoubled", err)
	}
	if err := s.DrainErrors(ctx); err != nil {
		t.Errorf("empty queue: DrainErrors = %v, want nil", err)
	}
}

func TestSessionSlowAndSplitAnswers(t *testing.T) {
	ctx := context.Background()
	long := strings.Repeat("0.125,", 999) + "0.125\n"
	s, _ := dial(t, time.Second,
		// Answer after 300 ms: inside the 1 s timeout.
		instrtest.Step{Cmd: "SENSe:SWEep:TINTerval?", Reply: "1.0E-06\n", Delay: 300 * time.Millisecond},
		// Answer one byte per TCP segment.
		instrtest.Step{Cmd: "*IDN?", Reply: "Acme Testworks,DG-2,42,0.9\n", Chunk: 1, ChunkGap: time.Millisecond},
		// A reply longer than the read buffer's first fill, in 7-byte pieces.
		instrtest.Step{Cmd: "DATA?", Reply: long, Chunk: 7},
		// Each piece arrives within the timeout though the whole takes longer:
		// the timeout is an idle timeout.
		instrtest.Step{Cmd: "SLOW?", Reply: "abcdef\n", Chunk: 1, ChunkGap: 250 * time.Millisecond},
	)
	v, err := s.QueryNumber(ctx, "SENSe:SWEep:TINTerval?")
	if err != nil || v != 1e-6 {
		t.Fatalf("slow answer = %v, %v", v, err)
	}
	idn, err := s.IDN(ctx)
	if err != nil || idn != "Acme Testworks,DG-2,42,0.9" {
		t.Fatalf("split answer = %q, %v", idn, err)
	}
	got, err := s.Query(ctx, "DATA?")
	if err != nil || got != strings.TrimSuffix(long, "\n") {
		t.Fatalf("long split answer: %d bytes, %v; want %d", len(got), err, len(long)-1)
	}
	got, err = s.Query(ctx, "SLOW?")
	if err != nil || got != "abcdef" {
		t.Fatalf("slow trickle = %q, %v", got, err)
	}
}

func TestSessionTimeoutNamesCommandAndAddress(t *testing.T) {
	s, srv := dial(t, 150*time.Millisecond,
		instrtest.Step{Cmd: "SENSe:SWEep:POINts?", Hang: true},
	)
	start := time.Now()
	_, err := s.Query(context.Background(), "SENSe:SWEep:POINts?")
	took := time.Since(start)
	if !errors.Is(err, ErrTimeout) {
		t.Fatalf("err = %v, want ErrTimeout", err)
	}
	for _, want := range []string{"SENSe:SWEep:POINts?", srv.Addr()} {
		if !strings.Contains(err.Error(), want) {
			t.Errorf("error %q does not name %q", err, want)
		}
	}
	// The deadline fired near the 150 ms timeout, not much later.
	if took < 140*time.Millisecond || took > 2*time.Second {
		t.Errorf("timeout after %v, want about 150 ms", took)
	}
}

func TestSessionContextCancel(t *testing.T) {
	s, _ := dial(t, 10*time.Second, instrtest.Step{Cmd: "*OPC?", Hang: true})
	ctx, cancel := context.WithCancel(context.Background())
	time.AfterFunc(100*time.Millisecond, cancel)
	start := time.Now()
	err := s.OPC(ctx, 0)
	if !errors.Is(err, context.Canceled) {
		t.Fatalf("err = %v, want context.Canceled", err)
	}
	if d := time.Since(start); d > 3*time.Second {
		t.Errorf("cancel took %v", d)
	}
}

func TestSessionContextDeadline(t *testing.T) {
	s, _ := dial(t, 10*time.Second, instrtest.Step{Cmd: "*OPC?", Hang: true})
	ctx, cancel := context.WithTimeout(context.Background(), 100*time.Millisecond)
	defer cancel()
	err := s.OPC(ctx, 0)
	if !errors.Is(err, context.DeadlineExceeded) {
		t.Fatalf("err = %v, want context.DeadlineExceeded", err)
	}
}

func TestSessionBlocks(t *testing.T) {
	ctx := context.Background()
	// Values exactly representable in binary32, so the round trip is exact.
	want := []float64{0.5, -1.25, 3.0, 0, 0.0009765625, -7.75}
	// 0x0A inside binary data: 10.0 as binary64 starts with 0x40 0x24,
	// and the binary32 of this value contains 0x0A bytes.
	nl := []float64{float64(float32FromBits(0x0A0A0A0A)), 1}
	s, _ := dial(t, time.Second,
		instrtest.Step{Cmd: "TRACe:DATA? CH1", Reply: instrtest.Block(instrtest.Real32(want, false))},
		instrtest.Step{Cmd: "TRACe:DATA? CH2", Reply: instrtest.Block(instrtest.Real32(nl, false)), Chunk: 3},
		instrtest.Step{Cmd: "LE?", Reply: "#0" + string(instrtest.Real64(want, true)) + "\n"},
		instrtest.Step{Cmd: "PRE?", Reply: ":WAV:DATA " + instrtest.Block(instrtest.Real32(want, false))},
		instrtest.Step{Cmd: "ASC?", Reply: "0.5, -1.25,3.0,0,9.765625E-04,-7.75\n", Chunk: 2},
		instrtest.Step{Cmd: "ASC2?", Reply: "+5.0E-01,-1.25E+00,3,-0,0.0009765625,-7.75,\r\n"},
		instrtest.Step{Cmd: "*IDN?", Reply: "x,y,z,w\n"},
	)
	got := make([]float64, len(want))
	if err := s.QueryBlock(ctx, "TRACe:DATA? CH1", DataFormat{Encoding: Real32}, got); err != nil {
		t.Fatal(err)
	}
	equal(t, "real32 big-endian", got, want)
	got2 := make([]float64, len(nl))
	if err := s.QueryBlock(ctx, "TRACe:DATA? CH2", DataFormat{Encoding: Real32}, got2); err != nil {
		t.Fatal(err)
	}
	equal(t, "block holding 0x0A bytes", got2, nl)
	if err := s.QueryBlock(ctx, "LE?", DataFormat{Encoding: Real64, LittleEndian: true}, got); err != nil {
		t.Fatal(err)
	}
	equal(t, "indefinite real64 little-endian", got, want)
	if err := s.QueryBlock(ctx, "PRE?", DataFormat{Encoding: Real32}, got); err != nil {
		t.Fatal(err)
	}
	equal(t, "block after a text preamble", got, want)
	if err := s.QueryBlock(ctx, "ASC?", DataFormat{}, got); err != nil {
		t.Fatal(err)
	}
	equal(t, "ascii", got, want)
	if err := s.QueryBlock(ctx, "ASC2?", DataFormat{}, got); err != nil {
		t.Fatal(err)
	}
	equal(t, "ascii with a trailing comma and CR LF", got, want)
	// The terminators were consumed: the next reply is in step.
	if idn, err := s.IDN(ctx); err != nil || idn != "x,y,z,w" {
		t.Fatalf("after blocks IDN = %q, %v", idn, err)
	}
}

func TestSessionBlockWrongLengthStaysInStep(t *testing.T) {
	ctx := context.Background()
	s, _ := dial(t, time.Second,
		instrtest.Step{Cmd: "TRACe:DATA? CH1", Reply: instrtest.Block(instrtest.Real32([]float64{1, 2, 3}, false))},
		instrtest.Step{Cmd: "*IDN?", Reply: "a,b,c,d\n"},
	)
	dst := make([]float64, 4)
	err := s.QueryBlock(ctx, "TRACe:DATA? CH1", DataFormat{Encoding: Real32}, dst)
	var be *BlockError
	if !errors.As(err, &be) || !strings.Contains(err.Error(), "holds 12 bytes, want 16") {
		t.Fatalf("err = %v, want a BlockError naming 12 and 16 bytes", err)
	}
	if idn, err := s.IDN(ctx); err != nil || idn != "a,b,c,d" {
		t.Fatalf("after a bad block IDN = %q, %v", idn, err)
	}
}

func TestSessionPeerClosesMidBlock(t *testing.T) {
	data := instrtest.Block(instrtest.Real32(make([]float64, 1000), false))
	s, srv := dial(t, time.Second,
		instrtest.Step{Cmd: "TRACe:DATA? CH1", Reply: data, CloseAt: len(data) / 2},
	)
	dst := make([]float64, 1000)
	err := s.QueryBlock(context.Background(), "TRACe:DATA? CH1", DataFormat{Encoding: Real32}, dst)
	if !errors.Is(err, io.ErrUnexpectedEOF) {
		t.Fatalf("err = %v, want io.ErrUnexpectedEOF", err)
	}
	for _, want := range []string{"TRACe:DATA? CH1", srv.Addr(), "closed"} {
		if !strings.Contains(err.Error(), want) {
			t.Errorf("error %q does not name %q", err, want)
		}
	}
}

func equal(t *testing.T, what string, got, want []float64) {
	t.Helper()
	if len(got) != len(want) {
		t.Fatalf("%s: %d values, want %d", what, len(got), len(want))
	}
	for i := range got {
		if got[i] != want[i] {
			t.Errorf("%s: [%d] = %v, want %v", what, i, got[i], want[i])
		}
	}
}

func TestWriteRejectsLineBreak(t *testing.T) {
	s, _ := dial(t, time.Second)
	if err := s.Write(context.Background(), "A\nB"); err == nil || !bytes.Contains([]byte(err.Error()), []byte("line break")) {
		t.Fatalf("err = %v", err)
	}
}

func float32FromBits(u uint32) float32 { return math.Float32frombits(u) }

// An instrument that sends no terminator after a definite block costs a
// brief wait, not the session timeout, and the next reply is in step.
func TestSessionBlockWithoutTerminator(t *testing.T) {
	ctx := context.Background()
	blk := instrtest.Block(instrtest.Real32([]float64{1, 2}, false))
	s, _ := dial(t, 3*time.Second,
		instrtest.Step{Cmd: "TRACe:DATA? CH1", Reply: strings.TrimSuffix(blk, "\n")},
		instrtest.Step{Cmd: "*IDN?", Reply: "a,b,c,d\n"},
	)
	dst := make([]float64, 2)
	start := time.Now()
	if err := s.QueryBlock(ctx, "TRACe:DATA? CH1", DataFormat{Encoding: Real32}, dst); err != nil {
		t.Fatal(err)
	}
	if d := time.Since(start); d > time.Second {
		t.Errorf("block without terminator took %v", d)
	}
	equal(t, "block", dst, []float64{1, 2})
	if idn, err := s.IDN(ctx); err != nil || idn != "a,b,c,d" {
		t.Fatalf("IDN = %q, %v", idn, err)
	}
}

// echoServer answers every query "X?" with "x" after a short pause, in
// whatever order commands come.
func echoServer(t *testing.T) string {
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { ln.Close() })
	go func() {
		c, err := ln.Accept()
		if err != nil {
			return
		}
		defer c.Close()
		r := bufio.NewReader(c)
		for {
			l, err := r.ReadString('\n')
			if err != nil {
				return
			}
			l = strings.TrimSpace(l)
			if strings.HasSuffix(l, "?") {
				time.Sleep(100 * time.Microsecond)
				io.WriteString(c, strings.ToLower(strings.TrimSuffix(l, "?"))+"\n")
			}
		}
	}()
	return "tcp://" + ln.Addr().String()
}

// Two goroutines sharing a Session each get their own replies: an
// exchange is never interleaved with another.
func TestSessionConcurrentExchanges(t *testing.T) {
	c, err := Open(echoServer(t), Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	s := NewSession(c, 2*time.Second)
	var wg sync.WaitGroup
	errs := make(chan error, 2)
	for _, who := range []string{"A", "B"} {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := range 100 {
				if i%3 == 0 {
					if err := s.Write(context.Background(), "OUTP OFF"); err != nil {
						errs <- err
						return
					}
				}
				r, err := s.Query(context.Background(), who+"?")
				if err != nil || r != strings.ToLower(who) {
					errs <- fmt.Errorf("%s query %d: %q, %v", who, i, r, err)
					return
				}
			}
		}()
	}
	wg.Wait()
	close(errs)
	for err := range errs {
		t.Error(err)
	}
}

// A malformed block header leaves the block's bytes unread: the session
// must flush them so the next reply is in step (the simulator's
// corrupt-block fault sends a letter in place of the digit count).
func TestSessionBadHeaderFlushed(t *testing.T) {
	ctx := context.Background()
	data := instrtest.Real32(make([]float64, 256), false)
	for i := range data {
		data[i] = '\n' // newlines inside, so a line reader would be fooled too
	}
	s, _ := dial(t, time.Second,
		instrtest.Step{Cmd: "TRACe:DATA? CH1", Reply: "#Z1024" + string(data) + "\n"},
		instrtest.Step{Cmd: "*IDN?", Reply: "a,b,c,d\n"},
	)
	err := s.QueryBlock(ctx, "TRACe:DATA? CH1", DataFormat{Encoding: Real32}, make([]float64, 256))
	var be *BlockError
	if !errors.As(err, &be) || !strings.Contains(err.Error(), "got 'Z'") {
		t.Fatalf("err = %v, want a BlockError about 'Z'", err)
	}
	if idn, err := s.IDN(ctx); err != nil || idn != "a,b,c,d" {
		t.Fatalf("after a bad header IDN = %q, %v; want the next reply in step", idn, err)
	}
}

// A block that stops half way times out with a message saying how much
// arrived.
func TestSessionTruncatedBlockTimeout(t *testing.T) {
	data := instrtest.Block(instrtest.Real32(make([]float64, 1000), false))
	s, _ := dial(t, 200*time.Millisecond,
		instrtest.Step{Cmd: "TRACe:DATA? CH1", Reply: data[:6+2000], Hang: false},
	)
	err := s.QueryBlock(context.Background(), "TRACe:DATA? CH1", DataFormat{Encoding: Real32}, make([]float64, 1000))
	if !errors.Is(err, ErrTimeout) || !strings.Contains(err.Error(), "got 2000 of 4000 bytes") {
		t.Fatalf("err = %v, want a timeout saying 2000 of 4000 bytes arrived", err)
	}
}

func TestOpenErrorsNameTheAddress(t *testing.T) {
	// A port nobody listens on: take a free one and close it.
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	addr := "tcp://" + ln.Addr().String()
	ln.Close()
	if _, err := Open(addr, Options{}); err == nil || !strings.Contains(err.Error(), addr) {
		t.Errorf("Open(%s) = %v, want an error naming it", addr, err)
	}
	if _, err := Open("serial:///nonexistent/tty", Options{}); err == nil || !strings.Contains(err.Error(), "/nonexistent/tty") {
		t.Errorf("Open(missing serial device) = %v", err)
	}
	var ae *AddressError
	if _, err := Open("bogus://x", Options{}); !errors.As(err, &ae) {
		t.Errorf("Open(bogus) = %v, want *AddressError", err)
	}
}

func TestQueryNumberNamesCommand(t *testing.T) {
	s, _ := dial(t, time.Second, instrtest.Step{Cmd: "SENSe:SWEep:TINTerval?", Reply: "fast\n"})
	_, err := s.QueryNumber(context.Background(), "SENSe:SWEep:TINTerval?")
	if err == nil || !strings.Contains(err.Error(), `"SENSe:SWEep:TINTerval?"`) || !strings.Contains(err.Error(), `"fast"`) {
		t.Fatalf("err = %v, want the command and the reply named", err)
	}
}
