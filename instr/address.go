package instr

import (
	"fmt"
	"net"
	"net/url"
	"strconv"
	"strings"
)

// Transport names the kind of link an Address opens.
type Transport string

const (
	TCP    Transport = "tcp"    // raw SCPI socket
	Serial Transport = "serial" // RS-232 / USB-serial adapter
	USBTMC Transport = "usbtmc" // Linux usbtmc character device
)

// DefaultPort is the customary raw-socket SCPI port (IANA service name
// scpi-raw; common practice, memory of the IVI VISA specification).
const DefaultPort = 5025

// Parity values accepted in serial addresses.
const (
	ParityNone  = "none"
	ParityOdd   = "odd"
	ParityEven  = "even"
	ParityMark  = "mark"
	ParitySpace = "space"
)

// Flow-control values accepted in serial addresses.
const (
	FlowNone    = "none"
	FlowRTSCTS  = "rtscts"  // hardware handshake
	FlowXONXOFF = "xonxoff" // software handshake; unsafe with binary blocks
)

// SerialMode is a serial line's framing. The zero value of each field
// means its default: 9600 baud, 8 data bits, no parity, 1 stop bit, no
// flow control.
type SerialMode struct {
	Baud     int     // bits per second (default 9600)
	DataBits int     // 5..8 (default 8)
	Parity   string  // ParityNone.. (default none)
	StopBits float64 // 1, 1.5 or 2 (default 1)
	Flow     string  // FlowNone, FlowRTSCTS or FlowXONXOFF (default none)
}

// withDefaults fills the zero fields.
func (m SerialMode) withDefaults() SerialMode {
	if m.Baud == 0 {
		m.Baud = 9600
	}
	if m.DataBits == 0 {
		m.DataBits = 8
	}
	if m.Parity == "" {
		m.Parity = ParityNone
	}
	if m.StopBits == 0 {
		m.StopBits = 1
	}
	if m.Flow == "" {
		m.Flow = FlowNone
	}
	return m
}

// Address is a parsed instrument address.
type Address struct {
	Transport Transport
	Host      string     // TCP: host name or IP literal
	Port      int        // TCP: port (DefaultPort when not given)
	Device    string     // serial and usbtmc: device path
	Mode      SerialMode // serial only, defaults filled in
	Raw       string     // the text as the user typed it
}

// String returns the canonical short form of a, the form Open accepts
// and error messages print.
func (a Address) String() string {
	switch a.Transport {
	case TCP:
		// A zone in an IPv6 literal is written %25 in a URL (RFC 6874).
		return "tcp://" + net.JoinHostPort(strings.ReplaceAll(a.Host, "%", "%25"), strconv.Itoa(a.Port))
	case Serial:
		m := a.Mode
		u := url.URL{Scheme: "serial", Path: a.Device, RawQuery: fmt.Sprintf("baud=%d&data=%d&parity=%s&stop=%s&flow=%s",
			m.Baud, m.DataBits, m.Parity, strconv.FormatFloat(m.StopBits, 'g', -1, 64), m.Flow)}
		return u.String()
	case USBTMC:
		u := url.URL{Scheme: "usbtmc", Path: a.Device}
		return u.String()
	}
	return a.Raw
}

// AddressError reports an address that does not parse.
type AddressError struct {
	Addr   string // as given
	Reason string
}

func (e *AddressError) Error() string {
	return fmt.Sprintf("address %q: %s", e.Addr, e.Reason)
}

func badAddr(s, format string, a ...any) error {
	return &AddressError{Addr: s, Reason: fmt.Sprintf(format, a...)}
}

// ParseAddress parses an instrument address. Accepted forms:
//
//	tcp://HOST[:PORT]                       raw socket, port 5025 by default
//	HOST:PORT                               the same
//	192.168.1.20, scope.lab.example         an IP address or dotted host name: port 5025
//	serial:///dev/ttyUSB0?baud=115200&data=8&parity=none&stop=1&flow=none
//	usbtmc:///dev/usbtmc0
//	/dev/ttyUSB0, /dev/usbtmc0              a device path: usbtmc when the
//	                                        name starts with "usbtmc", else serial
//
// and the IVI VISA resource names (memory of the IVI VISA specification):
//
//	TCPIP[board]::HOST::PORT::SOCKET
//	ASRL[board]::INSTR, ASRL/dev/ttyUSB0::INSTR
//
// VISA forms loopsweep cannot open without a VISA library
// (TCPIP::HOST::INSTR, the VXI-11 protocol, and USB::…::INSTR) are
// rejected with a message naming the form to use instead.
func ParseAddress(s string) (Address, error) {
	t := strings.TrimSpace(s)
	if t == "" {
		return Address{}, badAddr(s, "empty")
	}
	up := strings.ToUpper(t)
	switch {
	case strings.Contains(t, "://"):
		return parseURL(s, t)
	case strings.HasPrefix(up, "TCPIP") && strings.Contains(t, "::"):
		return parseVISATCP(s, t)
	case strings.HasPrefix(up, "ASRL"):
		return parseVISASerial(s, t)
	case strings.HasPrefix(up, "USB") && strings.Contains(t, "::"):
		return Address{}, badAddr(s, "VISA USB resource names need a VISA library; on Linux use the kernel's usbtmc device instead, e.g. usbtmc:///dev/usbtmc0")
	case strings.HasPrefix(up, "GPIB") || strings.HasPrefix(up, "VXI") || strings.HasPrefix(up, "PXI"):
		return Address{}, badAddr(s, "GPIB, VXI and PXI resources are not supported; use tcp://, serial:// or usbtmc://")
	case strings.HasPrefix(t, "/"):
		return devicePath(s, t)
	}
	if host, port, err := net.SplitHostPort(t); err == nil {
		return tcpAddr(s, host, port)
	}
	if net.ParseIP(t) != nil || strings.Contains(t, ".") && !strings.ContainsAny(t, "/:?#") {
		// A bare IP address or dotted host name: the raw socket port.
		return tcpAddr(s, t, "")
	}
	return Address{}, badAddr(s, "unknown form; expected tcp://HOST:PORT, serial:///dev/DEVICE?baud=N, usbtmc:///dev/usbtmcN, a device path or a VISA TCPIP::HOST::PORT::SOCKET / ASRL…::INSTR name")
}

// checkDevice rejects device paths with control characters.
func checkDevice(s, path string) error {
	for _, c := range path {
		if c < 0x20 || c == 0x7f {
			return badAddr(s, "device path %q has a control character", path)
		}
	}
	return nil
}

func devicePath(s, path string) (Address, error) {
	if err := checkDevice(s, path); err != nil {
		return Address{}, err
	}
	base := path[strings.LastIndexByte(path, '/')+1:]
	if base == "" {
		return Address{}, badAddr(s, "device path ends in '/'")
	}
	if strings.HasPrefix(base, "usbtmc") {
		return Address{Transport: USBTMC, Device: path, Raw: s}, nil
	}
	return Address{Transport: Serial, Device: path, Mode: SerialMode{}.withDefaults(), Raw: s}, nil
}

func tcpAddr(s, host, port string) (Address, error) {
	if host == "" {
		return Address{}, badAddr(s, "missing host")
	}
	for _, c := range host {
		if !(c >= 'a' && c <= 'z' || c >= 'A' && c <= 'Z' || c >= '0' && c <= '9' || strings.ContainsRune("-._:%", c)) {
			return Address{}, badAddr(s, "bad host %q: character %q", host, c)
		}
	}
	if strings.Contains(host, ":") {
		ip, zone, hasZone := strings.Cut(host, "%")
		if net.ParseIP(ip) == nil {
			return Address{}, badAddr(s, "bad host %q: not an IPv6 address", host)
		}
		if hasZone && (zone == "" || strings.Contains(zone, "%")) {
			return Address{}, badAddr(s, "bad host %q: empty or malformed IPv6 zone", host)
		}
	} else if strings.Contains(host, "%") {
		return Address{}, badAddr(s, "bad host %q: character '%%'", host)
	}
	p := DefaultPort
	if port != "" {
		n, err := strconv.Atoi(port)
		if err != nil || n < 1 || n > 65535 {
			return Address{}, badAddr(s, "port %q is not a number in 1..65535", port)
		}
		p = n
	}
	return Address{Transport: TCP, Host: host, Port: p, Raw: s}, nil
}

func parseURL(s, t string) (Address, error) {
	u, err := url.Parse(t)
	if err != nil {
		return Address{}, badAddr(s, "%v", err)
	}
	switch strings.ToLower(u.Scheme) {
	case "tcp":
		if u.Path != "" && u.Path != "/" || u.RawQuery != "" {
			return Address{}, badAddr(s, "tcp addresses take no path or query")
		}
		return tcpAddr(s, u.Hostname(), u.Port())
	case "usbtmc":
		if u.Host != "" || u.Path == "" || u.RawQuery != "" {
			return Address{}, badAddr(s, "expected usbtmc:///dev/usbtmcN")
		}
		return Address{Transport: USBTMC, Device: u.Path, Raw: s}, nil
	case "serial":
		if u.Host != "" || u.Path == "" {
			return Address{}, badAddr(s, "expected serial:///dev/DEVICE?baud=N (three slashes)")
		}
		m, err := parseSerialQuery(s, u.Query())
		if err != nil {
			return Address{}, err
		}
		return Address{Transport: Serial, Device: u.Path, Mode: m, Raw: s}, nil
	}
	return Address{}, badAddr(s, "unknown scheme %q (want tcp, serial or usbtmc)", u.Scheme)
}

func parseSerialQuery(s string, q url.Values) (SerialMode, error) {
	var m SerialMode
	for k, vs := range q {
		if len(vs) != 1 {
			return m, badAddr(s, "serial option %q given %d times", k, len(vs))
		}
		v := strings.ToLower(vs[0])
		switch strings.ToLower(k) {
		case "baud":
			n, err := strconv.Atoi(v)
			if err != nil || n <= 0 {
				return m, badAddr(s, "baud %q is not a positive integer", vs[0])
			}
			m.Baud = n
		case "data", "databits":
			n, err := strconv.Atoi(v)
			if err != nil || n < 5 || n > 8 {
				return m, badAddr(s, "data bits %q: want 5, 6, 7 or 8", vs[0])
			}
			m.DataBits = n
		case "parity":
			switch v {
			case ParityNone, ParityOdd, ParityEven, ParityMark, ParitySpace:
				m.Parity = v
			case "n":
				m.Parity = ParityNone
			case "o":
				m.Parity = ParityOdd
			case "e":
				m.Parity = ParityEven
			default:
				return m, badAddr(s, "parity %q: want none, odd, even, mark or space", vs[0])
			}
		case "stop", "stopbits":
			switch v {
			case "1":
				m.StopBits = 1
			case "1.5":
				m.StopBits = 1.5
			case "2":
				m.StopBits = 2
			default:
				return m, badAddr(s, "stop bits %q: want 1, 1.5 or 2", vs[0])
			}
		case "flow":
			switch v {
			case FlowNone, FlowRTSCTS, FlowXONXOFF:
				m.Flow = v
			case "hardware", "rts/cts":
				m.Flow = FlowRTSCTS
			case "software", "xon/xoff":
				m.Flow = FlowXONXOFF
			default:
				return m, badAddr(s, "flow %q: want none, rtscts or xonxoff", vs[0])
			}
		default:
			return m, badAddr(s, "unknown serial option %q (want baud, data, parity, stop, flow)", k)
		}
	}
	return m.withDefaults(), nil
}

// parseVISATCP handles TCPIP[board]::host::port::SOCKET.
func parseVISATCP(s, t string) (Address, error) {
	parts := strings.Split(t, "::")
	if _, err := visaBoard(parts[0], "TCPIP"); err != nil {
		return Address{}, badAddr(s, "%v", err)
	}
	last := strings.ToUpper(parts[len(parts)-1])
	switch {
	case len(parts) == 4 && last == "SOCKET":
		if parts[2] == "" {
			return Address{}, badAddr(s, "missing port before ::SOCKET")
		}
		return tcpAddr(s, parts[1], parts[2])
	case last == "INSTR" || len(parts) == 2:
		return Address{}, badAddr(s, "TCPIP::…::INSTR uses the VXI-11 or HiSLIP protocol, which loopsweep does not speak; use the instrument's raw socket: TCPIP::%s::5025::SOCKET or tcp://%s:5025", parts[1], parts[1])
	}
	return Address{}, badAddr(s, "expected TCPIP[board]::HOST::PORT::SOCKET")
}

// parseVISASerial handles ASRL[board]::INSTR and ASRL/dev/path::INSTR.
func parseVISASerial(s, t string) (Address, error) {
	body, ok := strings.CutSuffix(t, "::INSTR")
	if !ok {
		body, ok = strings.CutSuffix(t, "::instr")
	}
	if !ok || strings.Contains(body, "::") {
		return Address{}, badAddr(s, "expected ASRL<n>::INSTR or ASRL/dev/DEVICE::INSTR")
	}
	rest := body[4:]
	if strings.HasPrefix(rest, "/") {
		if err := checkDevice(s, rest); err != nil {
			return Address{}, err
		}
		return Address{Transport: Serial, Device: rest, Mode: SerialMode{}.withDefaults(), Raw: s}, nil
	}
	n, err := visaBoard(body, "ASRL")
	if err != nil {
		return Address{}, badAddr(s, "%v", err)
	}
	if n < 1 {
		return Address{}, badAddr(s, "ASRL board numbers start at 1 (ASRL1 is the first port)")
	}
	// Common practice on Linux: ASRL1 is the first on-board port, ttyS0.
	dev := fmt.Sprintf("/dev/ttyS%d", n-1)
	return Address{Transport: Serial, Device: dev, Mode: SerialMode{}.withDefaults(), Raw: s}, nil
}

// visaBoard parses the optional board number after a VISA interface name.
func visaBoard(head, iface string) (int, error) {
	if len(head) < len(iface) || !strings.EqualFold(head[:len(iface)], iface) {
		return 0, fmt.Errorf("expected %s", iface)
	}
	num := head[len(iface):]
	if num == "" {
		return 0, nil
	}
	n, err := strconv.Atoi(num)
	if err != nil || n < 0 {
		return 0, fmt.Errorf("board number %q is not a non-negative integer", num)
	}
	return n, nil
}
