package instr

import (
	"bufio"
	"context"
	"errors"
	"math"
	"os"
	"os/exec"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"

	"golang.org/x/sys/unix"
)

// ptyPair starts socat with two linked pseudo-terminals, as
// go.bug.st/serial's own tests do, and returns their paths. It skips the
// test only when socat is not installed (CI installs it).
func ptyPair(t *testing.T) (string, string) {
	t.Helper()
	bin, err := exec.LookPath("socat")
	if err != nil {
		t.Skip("socat not installed")
	}
	cmd := exec.Command(bin, "-d", "-d", "pty,raw,echo=0", "pty,raw,echo=0")
	stderr, err := cmd.StderrPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		cmd.Process.Kill()
		cmd.Wait()
	})
	re := regexp.MustCompile(`PTY is (/dev/pts/\d+)`)
	var paths []string
	sc := bufio.NewScanner(stderr)
	found := make(chan []string, 1)
	go func() {
		for sc.Scan() {
			if m := re.FindStringSubmatch(sc.Text()); m != nil {
				paths = append(paths, m[1])
				if len(paths) == 2 {
					found <- paths
				}
			}
			if strings.Contains(sc.Text(), "starting data transfer loop") {
				break
			}
		}
		for sc.Scan() { // keep draining so socat never blocks on stderr
		}
	}()
	select {
	case p := <-found:
		// Wait until socat is relaying before using the pair.
		time.Sleep(50 * time.Millisecond)
		return p[0], p[1]
	case <-time.After(5 * time.Second):
		t.Fatal("socat did not report two ptys")
	}
	return "", ""
}

// instrumentOnPty answers on the far pty like a serial instrument: it
// reads lines and replies from the map; an unknown command gets nothing.
func instrumentOnPty(t *testing.T, path string, replies map[string]string) {
	t.Helper()
	f, err := os.OpenFile(path, os.O_RDWR, 0)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { f.Close() })
	go func() {
		r := bufio.NewReader(f)
		for {
			line, err := r.ReadString('\n')
			if err != nil {
				return
			}
			if rep, ok := replies[strings.TrimSpace(line)]; ok {
				f.Write([]byte(rep))
			}
		}
	}()
}

func TestSerialQueryAndBlockOverPty(t *testing.T) {
	near, far := ptyPair(t)
	// The last value's binary32 is 0x0A0A0A0A: newlines inside the block.
	vals := []float64{0.5, -2, 10, float64(math.Float32frombits(0x0A0A0A0A))}
	block := "#216" + string(real32BE(vals)) + "\n"
	instrumentOnPty(t, far, map[string]string{
		"*IDN?":           "Acme Testworks,SG-3,7,2.1\r\n",
		"TRACe:DATA? CH1": block,
	})
	c, err := Open("serial://"+near+"?baud=115200&data=8&parity=none&stop=1&flow=none", Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	s := NewSession(c, 2*time.Second)
	ctx := context.Background()
	idn, err := s.IDN(ctx)
	if err != nil || idn != "Acme Testworks,SG-3,7,2.1" {
		t.Fatalf("IDN over serial = %q, %v", idn, err)
	}
	got := make([]float64, len(vals))
	if err := s.QueryBlock(ctx, "TRACe:DATA? CH1", DataFormat{Encoding: Real32}, got); err != nil {
		t.Fatal(err)
	}
	equal(t, "block over serial", got, vals)
}

// go.bug.st/serial v1.8 returns (0, nil) from Read when its timeout
// expires; the session must report ErrTimeout naming the command and
// the port, at about the timeout, not loop.
func TestSerialTimeout(t *testing.T) {
	near, far := ptyPair(t)
	instrumentOnPty(t, far, nil) // reads, never answers
	c, err := Open("ASRL"+near+"::INSTR", Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	s := NewSession(c, 200*time.Millisecond)
	start := time.Now()
	_, err = s.Query(context.Background(), "MEASure:VOLTage?")
	took := time.Since(start)
	if !errors.Is(err, ErrTimeout) {
		t.Fatalf("err = %v, want ErrTimeout", err)
	}
	if !strings.Contains(err.Error(), "MEASure:VOLTage?") || !strings.Contains(err.Error(), near) {
		t.Errorf("error %q does not name the command and %s", err, near)
	}
	if took < 190*time.Millisecond || took > 2*time.Second {
		t.Errorf("timed out after %v, want about 200 ms", took)
	}
}

func TestSerialFlowControlOpens(t *testing.T) {
	near, _ := ptyPair(t)
	for _, tc := range []struct {
		flow  string
		check func(*unix.Termios) bool
	}{
		{"rtscts", func(tio *unix.Termios) bool { return tio.Cflag&unix.CRTSCTS != 0 }},
		{"xonxoff", func(tio *unix.Termios) bool { return tio.Iflag&(unix.IXON|unix.IXOFF) == unix.IXON|unix.IXOFF }},
		{"none", func(tio *unix.Termios) bool { return tio.Cflag&unix.CRTSCTS == 0 && tio.Iflag&unix.IXON == 0 }},
	} {
		c, err := Open("serial://"+near+"?baud=9600&flow="+tc.flow, Options{})
		if err != nil {
			t.Fatalf("flow=%s: %v", tc.flow, err)
		}
		// Read the line settings back through a second descriptor (the
		// exclusive lock may refuse it when not running as root).
		if fd, err := unix.Open(near, unix.O_RDWR|unix.O_NOCTTY|unix.O_NONBLOCK, 0); err == nil {
			tio, err := unix.IoctlGetTermios(fd, unix.TCGETS)
			unix.Close(fd)
			if err != nil {
				t.Fatal(err)
			}
			if !tc.check(tio) {
				t.Errorf("flow=%s: termios cflag %#o iflag %#o", tc.flow, tio.Cflag, tio.Iflag)
			}
		} else {
			t.Logf("flow=%s: cannot reopen %s to check (%v)", tc.flow, near, err)
		}
		c.Close()
	}
}

func TestUSBTMCRejectsOtherDevices(t *testing.T) {
	// /dev/null answers the usbtmc timeout ioctl with ENOTTY.
	_, err := Open("usbtmc:///dev/null", Options{})
	if err == nil || !strings.Contains(err.Error(), "not a usbtmc device") || !strings.Contains(err.Error(), "/dev/null") {
		t.Fatalf("err = %v", err)
	}
}

func real32BE(v []float64) []byte {
	b := make([]byte, 0, 4*len(v))
	for _, x := range v {
		u := math.Float32bits(float32(x))
		b = append(b, byte(u>>24), byte(u>>16), byte(u>>8), byte(u))
	}
	return b
}

// openPty makes a pseudo-terminal whose master side nobody reads, so
// writes to the slave block once the line buffer is full, as they do
// when a serial instrument holds off the line with flow control.
func openPty(t *testing.T) string {
	t.Helper()
	m, err := unix.Open("/dev/ptmx", unix.O_RDWR|unix.O_NOCTTY|unix.O_CLOEXEC, 0)
	if err != nil {
		t.Skipf("no /dev/ptmx: %v", err)
	}
	t.Cleanup(func() { unix.Close(m) }) // unblocks the stuck write with EIO
	if err := unix.IoctlSetPointerInt(m, unix.TIOCSPTLCK, 0); err != nil {
		t.Fatal(err)
	}
	n, err := unix.IoctlGetInt(m, unix.TIOCGPTN)
	if err != nil {
		t.Fatal(err)
	}
	return "/dev/pts/" + strconv.Itoa(n)
}

func TestSerialWriteTimeout(t *testing.T) {
	dev := openPty(t)
	c, err := Open("serial://"+dev, Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	s := NewSession(c, 200*time.Millisecond)
	big := strings.Repeat("X", 1<<20) // far more than a pty buffers
	start := time.Now()
	err = s.Write(context.Background(), big)
	took := time.Since(start)
	if !errors.Is(err, ErrTimeout) || !strings.Contains(err.Error(), dev) {
		t.Fatalf("err = %.200v, want ErrTimeout naming %s", err, dev)
	}
	if len(err.Error()) > 400 {
		t.Errorf("error message is %d bytes long: the command should be clipped", len(err.Error()))
	}
	if took > 2*time.Second {
		t.Errorf("write timed out after %v, want about 200 ms", took)
	}
	// The port stays unusable while that write is stuck, and says so.
	if err := s.Write(context.Background(), "*CLS"); !errors.Is(err, ErrTimeout) || !strings.Contains(err.Error(), "still blocked") {
		t.Fatalf("second write: %.200v", err)
	}
}
