package instrtest

import (
	"bufio"
	"fmt"
	"net"
	"strings"
	"sync"
	"testing"
	"time"
)

// recorder is a testing.TB that keeps the errors instead of failing, so
// the Server's own checks can be checked.
type recorder struct {
	testing.TB
	mu   sync.Mutex
	errs []string
}

func (r *recorder) Errorf(format string, a ...any) {
	r.mu.Lock()
	defer r.mu.Unlock()
	r.errs = append(r.errs, fmt.Sprintf(format, a...))
}

func (r *recorder) Cleanup(func()) {} // the test calls Close itself

func (r *recorder) all() string {
	r.mu.Lock()
	defer r.mu.Unlock()
	return strings.Join(r.errs, "\n")
}

func talk(t *testing.T, addr string, lines ...string) []string {
	t.Helper()
	c, err := net.Dial("tcp", strings.TrimPrefix(addr, "tcp://"))
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	r := bufio.NewReader(c)
	var got []string
	for _, l := range lines {
		fmt.Fprintf(c, "%s\n", l)
		if strings.HasSuffix(l, "?") {
			c.SetReadDeadline(time.Now().Add(time.Second))
			s, err := r.ReadString('\n')
			if err != nil {
				got = append(got, "ERR "+err.Error())
				continue
			}
			got = append(got, s)
		}
	}
	return got
}

func TestServerPlaysScript(t *testing.T) {
	rec := &recorder{TB: t}
	s := NewServer(rec, Step{Cmd: "A"}, Step{Cmd: "B?", Reply: "b\n", Chunk: 1})
	got := talk(t, s.Addr(), "A", "B?")
	s.Close()
	if len(got) != 1 || got[0] != "b\n" {
		t.Errorf("replies %q", got)
	}
	if e := rec.all(); e != "" {
		t.Errorf("unexpected failures: %s", e)
	}
	if r := s.Received(); strings.Join(r, ",") != "A,B?" {
		t.Errorf("received %q", r)
	}
}

func TestServerReportsMismatch(t *testing.T) {
	rec := &recorder{TB: t}
	s := NewServer(rec, Step{Cmd: "FREQ 1000"})
	talk(t, s.Addr(), "FREQ 1001")
	s.Close()
	if e := rec.all(); !strings.Contains(e, `got "FREQ 1001", want "FREQ 1000"`) {
		t.Errorf("failures %q, want the mismatch", e)
	}
}

func TestServerReportsLeftovers(t *testing.T) {
	rec := &recorder{TB: t}
	s := NewServer(rec, Step{Cmd: "A"}, Step{Cmd: "B"})
	talk(t, s.Addr(), "A")
	time.Sleep(50 * time.Millisecond)
	s.Close()
	if e := rec.all(); !strings.Contains(e, `1 of 2 steps not played; next wanted "B"`) {
		t.Errorf("failures %q, want the leftover step", e)
	}
}

func TestServerReportsExtraCommand(t *testing.T) {
	rec := &recorder{TB: t}
	s := NewServer(rec, Step{Cmd: "A"})
	talk(t, s.Addr(), "A", "EXTRA")
	time.Sleep(50 * time.Millisecond)
	s.Close()
	if e := rec.all(); !strings.Contains(e, `unexpected command after the script: "EXTRA"`) {
		t.Errorf("failures %q, want the extra command", e)
	}
}

func TestBlockHeader(t *testing.T) {
	// IEEE 488.2 8.7.9 (memory): '#', digit count, byte count, bytes.
	if got := Block([]byte("0123456789AB")); got != "#2120123456789AB\n" {
		t.Errorf("Block = %q", got)
	}
	if got := IndefiniteBlock([]byte{1}); got != "#0\x01\n" {
		t.Errorf("IndefiniteBlock = %q", got)
	}
}
