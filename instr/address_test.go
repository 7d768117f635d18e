package instr

import (
	"errors"
	"strings"
	"testing"
)

func TestParseAddress(t *testing.T) {
	def := SerialMode{}.withDefaults()
	// VISA resource-name forms from the IVI VISA specification (memory);
	// port 5025 is the customary SCPI raw socket (common practice).
	tests := []struct {
		in   string
		want Address
	}{
		{"tcp://10.0.0.5:5025", Address{Transport: TCP, Host: "10.0.0.5", Port: 5025}},
		{"tcp://scope.lab", Address{Transport: TCP, Host: "scope.lab", Port: 5025}},
		{"tcp://[::1]:6000", Address{Transport: TCP, Host: "::1", Port: 6000}},
		{"127.0.0.1:7000", Address{Transport: TCP, Host: "127.0.0.1", Port: 7000}},
		{"192.168.1.20", Address{Transport: TCP, Host: "192.168.1.20", Port: 5025}},
		{"::1", Address{Transport: TCP, Host: "::1", Port: 5025}},
		{"scope.lab.example", Address{Transport: TCP, Host: "scope.lab.example", Port: 5025}},
		{"TCPIP::192.168.1.20::5025::SOCKET", Address{Transport: TCP, Host: "192.168.1.20", Port: 5025}},
		{"TCPIP0::gen.lab::5555::SOCKET", Address{Transport: TCP, Host: "gen.lab", Port: 5555}},
		{"tcpip1::gen.lab::5555::socket", Address{Transport: TCP, Host: "gen.lab", Port: 5555}},
		{"serial:///dev/ttyUSB0?baud=115200&parity=none&data=8&stop=1&flow=none",
			Address{Transport: Serial, Device: "/dev/ttyUSB0", Mode: SerialMode{Baud: 115200, DataBits: 8, Parity: "none", StopBits: 1, Flow: "none"}}},
		{"serial:///dev/ttyS1?baud=19200&parity=even&data=7&stop=2&flow=rtscts",
			Address{Transport: Serial, Device: "/dev/ttyS1", Mode: SerialMode{Baud: 19200, DataBits: 7, Parity: "even", StopBits: 2, Flow: "rtscts"}}},
		{"serial:///dev/ttyACM0", Address{Transport: Serial, Device: "/dev/ttyACM0", Mode: def}},
		{"ASRL/dev/ttyUSB1::INSTR", Address{Transport: Serial, Device: "/dev/ttyUSB1", Mode: def}},
		// Common practice on Linux: ASRL1 is the first on-board port.
		{"ASRL1::INSTR", Address{Transport: Serial, Device: "/dev/ttyS0", Mode: def}},
		{"ASRL3::INSTR", Address{Transport: Serial, Device: "/dev/ttyS2", Mode: def}},
		{"/dev/ttyUSB0", Address{Transport: Serial, Device: "/dev/ttyUSB0", Mode: def}},
		{"usbtmc:///dev/usbtmc0", Address{Transport: USBTMC, Device: "/dev/usbtmc0"}},
		{"/dev/usbtmc2", Address{Transport: USBTMC, Device: "/dev/usbtmc2"}},
	}
	for _, tc := range tests {
		t.Run(tc.in, func(t *testing.T) {
			got, err := ParseAddress(tc.in)
			if err != nil {
				t.Fatalf("ParseAddress(%q): %v", tc.in, err)
			}
			tc.want.Raw = tc.in
			if got != tc.want {
				t.Errorf("ParseAddress(%q) = %+v, want %+v", tc.in, got, tc.want)
			}
			// The canonical form parses back to the same link.
			again, err := ParseAddress(got.String())
			if err != nil {
				t.Fatalf("ParseAddress(String() = %q): %v", got.String(), err)
			}
			again.Raw = got.Raw
			if again != got {
				t.Errorf("round trip via %q = %+v, want %+v", got.String(), again, got)
			}
		})
	}
}

func TestParseAddressErrors(t *testing.T) {
	tests := []struct {
		in, wantSub string
	}{
		{"", "empty"},
		{"ftp://host", `unknown scheme "ftp"`},
		{"tcp://host:99999", "port"},
		{"tcp://host:abc", "port"},
		{"tcp://:5025", "missing host"},
		{"TCPIP::10.0.0.1::INSTR", "raw socket"},
		{"TCPIP::10.0.0.1::inst0::INSTR", "raw socket"},
		{"TCPIP::10.0.0.1::5025::FOO", "SOCKET"},
		{"USB0::0x1234::0x5678::SN1::INSTR", "usbtmc:///dev/usbtmc0"},
		{"GPIB0::12::INSTR", "not supported"},
		{"ASRL::INSTR", "start at 1"},
		{"ASRLx::INSTR", "board number"},
		{"ASRL1", "ASRL<n>::INSTR"},
		{"serial:///dev/ttyUSB0?baud=fast", "baud"},
		{"serial:///dev/ttyUSB0?parity=maybe", "parity"},
		{"serial:///dev/ttyUSB0?stop=3", "stop bits"},
		{"serial:///dev/ttyUSB0?data=9", "data bits"},
		{"serial:///dev/ttyUSB0?flow=magic", "flow"},
		{"serial:///dev/ttyUSB0?speed=9600", `unknown serial option "speed"`},
		{"serial://dev/ttyUSB0", "three slashes"},
		{"usbtmc://dev/usbtmc0", "usbtmc:///dev/usbtmcN"},
		{"just-a-name", "unknown form"},
	}
	for _, tc := range tests {
		t.Run(tc.in, func(t *testing.T) {
			_, err := ParseAddress(tc.in)
			var ae *AddressError
			if !errors.As(err, &ae) {
				t.Fatalf("ParseAddress(%q) error = %v, want *AddressError", tc.in, err)
			}
			if !strings.Contains(err.Error(), tc.wantSub) || !strings.Contains(err.Error(), tc.in) {
				t.Errorf("ParseAddress(%q) error %q, want it to name the address and contain %q", tc.in, err, tc.wantSub)
			}
		})
	}
}

func FuzzParseAddress(f *testing.F) {
	for _, s := range []string{"tcp://h:5025", "TCPIP::h::1::SOCKET", "ASRL1::INSTR", "serial:///dev/x?baud=9600", "/dev/usbtmc0", "h:1"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		a, err := ParseAddress(s)
		if err != nil {
			var ae *AddressError
			if !errors.As(err, &ae) {
				t.Fatalf("error %v is not an *AddressError", err)
			}
			return
		}
		// Whatever parses has a transport and a canonical form that
		// parses to the same link.
		b, err := ParseAddress(a.String())
		if err != nil {
			t.Fatalf("canonical form %q of %q does not parse: %v", a.String(), s, err)
		}
		a.Raw, b.Raw = "", ""
		if a != b {
			t.Fatalf("round trip of %q: %+v then %+v", s, a, b)
		}
	})
}
