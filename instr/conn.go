package instr

import (
	"errors"
	"fmt"
	"io"
	"net"
	"os"
	"time"
)

// ErrTimeout is wrapped by every error caused by a deadline expiring: a
// write the instrument did not accept or an answer that did not come.
// Test with errors.Is(err, ErrTimeout).
var ErrTimeout = errors.New("timeout")

// Conn is an open link to one instrument. Read and Write honour the
// deadlines; a read or write past its deadline returns an error for
// which errors.Is(err, ErrTimeout) is true. Addr names the instrument
// for error messages.
type Conn interface {
	io.ReadWriteCloser
	SetReadDeadline(t time.Time) error
	SetWriteDeadline(t time.Time) error
	Addr() string
}

// Options tune Open. The zero value is ready to use.
type Options struct {
	// DialTimeout bounds connecting (TCP) or opening the device; zero
	// means 5 s.
	DialTimeout time.Duration
}

func (o Options) dialTimeout() time.Duration {
	if o.DialTimeout <= 0 {
		return 5 * time.Second
	}
	return o.DialTimeout
}

// Open parses addr (see ParseAddress) and opens the link. The caller
// owns the Conn and must Close it.
func Open(addr string, opt Options) (Conn, error) {
	a, err := ParseAddress(addr)
	if err != nil {
		return nil, err
	}
	return OpenAddress(a, opt)
}

// OpenAddress opens an already parsed address.
func OpenAddress(a Address, opt Options) (Conn, error) {
	switch a.Transport {
	case TCP:
		return dialTCP(a, opt)
	case Serial:
		return openSerial(a, opt)
	case USBTMC:
		return openUSBTMC(a, opt)
	}
	return nil, fmt.Errorf("open %s: unknown transport %q", a, a.Transport)
}

// isTimeout reports whether err is a deadline expiry from any transport.
func isTimeout(err error) bool {
	if errors.Is(err, ErrTimeout) || errors.Is(err, os.ErrDeadlineExceeded) {
		return true
	}
	var ne net.Error
	return errors.As(err, &ne) && ne.Timeout()
}

// tcpConn is a raw SCPI socket.
type tcpConn struct {
	*net.TCPConn
	addr string
}

func dialTCP(a Address, opt Options) (Conn, error) {
	hp := net.JoinHostPort(a.Host, fmt.Sprint(a.Port))
	c, err := net.DialTimeout("tcp", hp, opt.dialTimeout())
	if err != nil {
		if isTimeout(err) {
			return nil, fmt.Errorf("connect %s: %w: %w", a, ErrTimeout, err)
		}
		return nil, fmt.Errorf("connect %s: %w", a, err)
	}
	tc := c.(*net.TCPConn)
	// Commands are short and each waits for its answer: send at once.
	if err := tc.SetNoDelay(true); err != nil {
		tc.Close()
		return nil, fmt.Errorf("connect %s: set no-delay: %w", a, err)
	}
	return &tcpConn{TCPConn: tc, addr: a.String()}, nil
}

func (c *tcpConn) Addr() string { return c.addr }
