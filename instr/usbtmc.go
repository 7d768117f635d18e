package instr

import (
	"errors"
	"fmt"
	"os"
	"time"

	"golang.org/x/sys/unix"
)

// The Linux usbtmc driver's ioctls (memory of include/uapi/linux/usb/tmc.h:
// USBTMC_IOC_NR is '[', GET_TIMEOUT is _IOR(nr, 9, __u32) and SET_TIMEOUT
// _IOW(nr, 10, __u32)). The driver does the USBTMC framing: one write is
// one message, a read returns up to one message, and a read or write
// that outlasts the timeout fails with ETIMEDOUT.
const (
	usbtmcIocNr       = '['
	usbtmcGetTimeout  = 2<<30 | 4<<16 | usbtmcIocNr<<8 | 9 // _IOR
	usbtmcSetTimeout  = 1<<30 | 4<<16 | usbtmcIocNr<<8 | 10
	usbtmcMinTimeout  = 100 * time.Millisecond // driver's lower bound (memory)
	usbtmcIdleTimeout = 5 * time.Second        // used when no deadline is set
)

// usbtmcConn is a /dev/usbtmcN character device. The device does not
// support poll-based deadlines, so a deadline is turned into the
// driver's own timeout just before each read or write.
type usbtmcConn struct {
	f     *os.File
	fd    int
	addr  string
	read  time.Time
	write time.Time
	cur   time.Duration // timeout last set in the driver
}

func openUSBTMC(a Address, opt Options) (Conn, error) {
	// Opened blocking (no O_NONBLOCK) so os.File does plain read(2) calls.
	fd, err := unix.Open(a.Device, unix.O_RDWR|unix.O_CLOEXEC, 0)
	if err != nil {
		return nil, fmt.Errorf("open %s: %w", a, err)
	}
	if _, err := unix.IoctlGetUint32(fd, usbtmcGetTimeout); err != nil {
		unix.Close(fd)
		return nil, fmt.Errorf("open %s: not a usbtmc device (timeout ioctl: %w)", a, err)
	}
	return &usbtmcConn{f: os.NewFile(uintptr(fd), a.Device), fd: fd, addr: a.String()}, nil
}

func (c *usbtmcConn) Addr() string                       { return c.addr }
func (c *usbtmcConn) Close() error                       { return c.f.Close() }
func (c *usbtmcConn) SetReadDeadline(t time.Time) error  { c.read = t; return nil }
func (c *usbtmcConn) SetWriteDeadline(t time.Time) error { c.write = t; return nil }

// arm sets the driver timeout for an operation due by deadline.
func (c *usbtmcConn) arm(deadline time.Time) error {
	d := usbtmcIdleTimeout
	if !deadline.IsZero() {
		d = time.Until(deadline)
		if d <= 0 {
			return fmt.Errorf("%s: %w", c.addr, ErrTimeout)
		}
	}
	d = max(d, usbtmcMinTimeout)
	if d == c.cur {
		return nil
	}
	ms := uint32(min(d.Milliseconds(), 1<<31))
	if err := unix.IoctlSetPointerInt(c.fd, usbtmcSetTimeout, int(ms)); err != nil {
		return fmt.Errorf("%s: set usbtmc timeout %d ms: %w", c.addr, ms, err)
	}
	c.cur = d
	return nil
}

func (c *usbtmcConn) Read(p []byte) (int, error) {
	if err := c.arm(c.read); err != nil {
		return 0, err
	}
	n, err := c.f.Read(p)
	return n, c.mapErr(err)
}

func (c *usbtmcConn) Write(p []byte) (int, error) {
	if err := c.arm(c.write); err != nil {
		return 0, err
	}
	n, err := c.f.Write(p)
	return n, c.mapErr(err)
}

func (c *usbtmcConn) mapErr(err error) error {
	if errors.Is(err, unix.ETIMEDOUT) {
		return fmt.Errorf("%s: %w: %w", c.addr, ErrTimeout, err)
	}
	return err
}
