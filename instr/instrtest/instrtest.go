// Package instrtest provides a scripted SCPI instrument on a real
// loopback socket for testing code built on package instr.
//
// A Server accepts one connection on 127.0.0.1, reads newline-ended
// commands, compares each with the next Step of its script and plays
// that step's reply, with delays, small segments, a dropped connection
// or silence as the step asks. At the end of the test it fails the test
// for any command that differed and any step left unplayed, in the
// manner of net/smtp's TestBasic and periph's conntest Playback.
package instrtest

import (
	"bufio"
	"encoding/binary"
	"fmt"
	"math"
	"net"
	"strings"
	"sync"
	"testing"
	"time"
)

// Step is one command the client must send and what the server does.
type Step struct {
	Cmd   string // expected command, without its newline
	Reply string // bytes sent back verbatim (include the "\n"); "" sends nothing

	Delay    time.Duration // wait before replying
	Chunk    int           // send Reply in pieces of this many bytes (0: at once)
	ChunkGap time.Duration // pause between pieces
	CloseAt  int           // close the connection after this many bytes of Reply (0: never)
	Hang     bool          // never answer; the connection stays open until the test ends
}

// Server is a scripted instrument on 127.0.0.1.
type Server struct {
	t      testing.TB
	ln     net.Listener
	script []Step

	mu     sync.Mutex
	got    []string // every command received
	played int      // steps finished
	conn   net.Conn
	done   chan struct{}
	ended  bool // the script ended the conversation (CloseAt or Hang)
}

// NewServer starts a Server playing script; it stops and checks the
// script in t.Cleanup.
func NewServer(t testing.TB, script ...Step) *Server {
	t.Helper()
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatalf("instrtest: listen: %v", err)
	}
	s := &Server{t: t, ln: ln, script: script, done: make(chan struct{})}
	go s.serve()
	t.Cleanup(s.Close)
	return s
}

// Addr is the server's address in loopsweep's short form, tcp://HOST:PORT.
func (s *Server) Addr() string { return "tcp://" + s.ln.Addr().String() }

// Received returns the commands received so far.
func (s *Server) Received() []string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return append([]string(nil), s.got...)
}

// closeGrace is how long Close lets the server finish reading what the
// client sent before it drops the connection.
const closeGrace = time.Second

// Close stops the server and reports unplayed steps. It first lets the
// server read to the client's end of the connection (up to closeGrace),
// so commands sent just before the client closed are still checked. It
// is safe to call more than once.
func (s *Server) Close() {
	s.mu.Lock()
	if s.ln != nil {
		s.ln.Close()
		s.ln = nil
	}
	s.mu.Unlock()
	select {
	case <-s.done:
	case <-time.After(closeGrace):
	}
	s.mu.Lock()
	if s.conn != nil {
		s.conn.Close()
	}
	s.mu.Unlock()
	<-s.done
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.played < len(s.script) && !s.ended {
		s.t.Errorf("instrtest: %d of %d steps not played; next wanted %q", len(s.script)-s.played, len(s.script), s.script[s.played].Cmd)
	}
}

func (s *Server) serve() {
	defer close(s.done)
	s.mu.Lock()
	ln := s.ln
	s.mu.Unlock()
	if ln == nil {
		return
	}
	c, err := ln.Accept()
	if err != nil {
		return
	}
	s.mu.Lock()
	s.conn = c
	s.mu.Unlock()
	defer c.Close()
	r := bufio.NewReader(c)
	for i := range s.script {
		line, err := r.ReadString('\n')
		if err != nil {
			return // the client went away; Close reports what was left
		}
		cmd := strings.TrimSuffix(strings.TrimSuffix(line, "\n"), "\r")
		st := s.script[i]
		s.mu.Lock()
		s.got = append(s.got, cmd)
		s.mu.Unlock()
		if cmd != st.Cmd {
			s.t.Errorf("instrtest: command %d: got %q, want %q", i+1, cmd, st.Cmd)
			s.mu.Lock()
			s.ended = true
			s.mu.Unlock()
			return
		}
		if st.Hang {
			s.mu.Lock()
			s.played++
			s.ended = true
			s.mu.Unlock()
			buf := make([]byte, 512)
			for {
				if _, err := c.Read(buf); err != nil {
					return
				}
			}
		}
		if st.Delay > 0 {
			time.Sleep(st.Delay)
		}
		if err := s.reply(c, st); err != nil {
			return
		}
		s.mu.Lock()
		s.played++
		if st.CloseAt > 0 {
			s.ended = true
		}
		s.mu.Unlock()
		if st.CloseAt > 0 {
			return
		}
	}
	// Anything after the script is a command nobody expected.
	if line, err := r.ReadString('\n'); err == nil {
		s.t.Errorf("instrtest: unexpected command after the script: %q", strings.TrimSuffix(line, "\n"))
	}
}

func (s *Server) reply(c net.Conn, st Step) error {
	b := []byte(st.Reply)
	if st.CloseAt > 0 && st.CloseAt < len(b) {
		b = b[:st.CloseAt]
	}
	if st.Chunk <= 0 {
		_, err := c.Write(b)
		return err
	}
	for len(b) > 0 {
		n := min(st.Chunk, len(b))
		if _, err := c.Write(b[:n]); err != nil {
			return err
		}
		b = b[n:]
		if len(b) > 0 && st.ChunkGap > 0 {
			time.Sleep(st.ChunkGap)
		}
	}
	return nil
}

// Block wraps data in an IEEE 488.2 definite-length arbitrary block
// header, #<d><count>, and ends it with a newline (IEEE Std 488.2
// clause 8.7.9; memory).
func Block(data []byte) string {
	n := fmt.Sprint(len(data))
	return "#" + fmt.Sprint(len(n)) + n + string(data) + "\n"
}

// IndefiniteBlock wraps data as #0<data> followed by a newline
// (IEEE Std 488.2 clause 8.7.10; memory).
func IndefiniteBlock(data []byte) string { return "#0" + string(data) + "\n" }

// Real32 encodes v as IEEE 754 binary32, big-endian unless little.
func Real32(v []float64, little bool) []byte {
	b := make([]byte, 4*len(v))
	for i, x := range v {
		u := math.Float32bits(float32(x))
		if little {
			binary.LittleEndian.PutUint32(b[4*i:], u)
		} else {
			binary.BigEndian.PutUint32(b[4*i:], u)
		}
	}
	return b
}

// Real64 encodes v as IEEE 754 binary64, big-endian unless little.
func Real64(v []float64, little bool) []byte {
	b := make([]byte, 8*len(v))
	for i, x := range v {
		u := math.Float64bits(x)
		if little {
			binary.LittleEndian.PutUint64(b[8*i:], u)
		} else {
			binary.BigEndian.PutUint64(b[8*i:], u)
		}
	}
	return b
}

// Int16 encodes codes as two's-complement 16-bit integers.
func Int16(codes []int16, little bool) []byte {
	b := make([]byte, 2*len(codes))
	for i, c := range codes {
		if little {
			binary.LittleEndian.PutUint16(b[2*i:], uint16(c))
		} else {
			binary.BigEndian.PutUint16(b[2*i:], uint16(c))
		}
	}
	return b
}
