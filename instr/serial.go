package instr

import (
	"fmt"
	"sync"
	"time"

	"go.bug.st/serial"
	"golang.org/x/sys/unix"
)

// serialConn adapts a go.bug.st/serial port to Conn.
//
// Reads: the port's read timeout is set from the deadline before each
// Read, and the (0, nil) that go.bug.st/serial v1.8 returns when that
// timeout expires becomes an ErrTimeout error — never a retry.
//
// Writes: the port has no write timeout (a write blocks while hardware
// flow control holds it), so a write runs in a goroutine and the caller
// stops waiting at the deadline. A write that timed out leaves the port
// unusable: later calls fail until Close.
type serialConn struct {
	port  serial.Port
	addr  string
	read  time.Time
	write time.Time

	mu      sync.Mutex
	stuck   bool // a write is still blocked in the kernel
	writeCh chan writeResult
}

type writeResult struct {
	n   int
	err error
}

func openSerial(a Address, opt Options) (Conn, error) {
	m := a.Mode.withDefaults()
	mode := &serial.Mode{BaudRate: m.Baud, DataBits: m.DataBits}
	switch m.Parity {
	case ParityNone:
		mode.Parity = serial.NoParity
	case ParityOdd:
		mode.Parity = serial.OddParity
	case ParityEven:
		mode.Parity = serial.EvenParity
	case ParityMark:
		mode.Parity = serial.MarkParity
	case ParitySpace:
		mode.Parity = serial.SpaceParity
	default:
		return nil, fmt.Errorf("open %s: parity %q: want none, odd, even, mark or space", a, m.Parity)
	}
	switch m.StopBits {
	case 1:
		mode.StopBits = serial.OneStopBit
	case 1.5:
		mode.StopBits = serial.OnePointFiveStopBits
	case 2:
		mode.StopBits = serial.TwoStopBits
	default:
		return nil, fmt.Errorf("open %s: stop bits %g: want 1, 1.5 or 2", a, m.StopBits)
	}
	// go.bug.st/serial always switches hardware flow control off and has
	// no software flow control, so the flags are set on a second file
	// descriptor opened first (termios settings belong to the device,
	// not the descriptor, and the library's exclusive lock only refuses
	// opens made after it).
	var side int = -1
	if m.Flow != FlowNone {
		fd, err := unix.Open(a.Device, unix.O_RDWR|unix.O_NOCTTY|unix.O_NONBLOCK|unix.O_CLOEXEC, 0)
		if err != nil {
			return nil, fmt.Errorf("open %s: %w", a, err)
		}
		side = fd
		defer unix.Close(side)
	}
	p, err := serial.Open(a.Device, mode)
	if err != nil {
		return nil, fmt.Errorf("open %s: %w", a, err)
	}
	if side >= 0 {
		if err := setFlow(side, m.Flow); err != nil {
			p.Close()
			return nil, fmt.Errorf("open %s: flow control %s: %w", a, m.Flow, err)
		}
	}
	return &serialConn{port: p, addr: a.String()}, nil
}

func setFlow(fd int, flow string) error {
	t, err := unix.IoctlGetTermios(fd, unix.TCGETS)
	if err != nil {
		return err
	}
	switch flow {
	case FlowRTSCTS:
		t.Cflag |= unix.CRTSCTS
	case FlowXONXOFF:
		t.Iflag |= unix.IXON | unix.IXOFF
	default:
		return fmt.Errorf("unknown flow control %q", flow)
	}
	return unix.IoctlSetTermios(fd, unix.TCSETS, t)
}

func (c *serialConn) Addr() string                       { return c.addr }
func (c *serialConn) Close() error                       { return c.port.Close() }
func (c *serialConn) SetReadDeadline(t time.Time) error  { c.read = t; return nil }
func (c *serialConn) SetWriteDeadline(t time.Time) error { c.write = t; return nil }

func (c *serialConn) Read(p []byte) (int, error) {
	if len(p) == 0 {
		return 0, nil
	}
	d := serial.NoTimeout
	if !c.read.IsZero() {
		d = time.Until(c.read)
		if d <= 0 {
			return 0, fmt.Errorf("%s: read: %w", c.addr, ErrTimeout)
		}
	}
	if err := c.port.SetReadTimeout(d); err != nil {
		return 0, fmt.Errorf("%s: set read timeout: %w", c.addr, err)
	}
	n, err := c.port.Read(p)
	if n == 0 && err == nil {
		// go.bug.st/serial v1.8: (0, nil) means the read timeout expired.
		return 0, fmt.Errorf("%s: read: %w", c.addr, ErrTimeout)
	}
	return n, err
}

func (c *serialConn) Write(p []byte) (int, error) {
	c.mu.Lock()
	defer c.mu.Unlock()
	if c.stuck {
		select {
		case <-c.writeCh:
			c.stuck = false
		default:
			return 0, fmt.Errorf("%s: an earlier write is still blocked (flow control held?): %w", c.addr, ErrTimeout)
		}
	}
	if c.write.IsZero() {
		return c.port.Write(p)
	}
	d := time.Until(c.write)
	if d <= 0 {
		return 0, fmt.Errorf("%s: write: %w", c.addr, ErrTimeout)
	}
	ch := make(chan writeResult, 1)
	buf := append([]byte(nil), p...) // the caller may reuse p after we return
	go func() {
		n, err := c.port.Write(buf)
		ch <- writeResult{n, err}
	}()
	t := time.NewTimer(d)
	defer t.Stop()
	select {
	case r := <-ch:
		return r.n, r.err
	case <-t.C:
		c.stuck, c.writeCh = true, ch
		return 0, fmt.Errorf("%s: write: %w", c.addr, ErrTimeout)
	}
}
